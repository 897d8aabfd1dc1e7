"""The fitting libraries' background import (pipeline._import_fitting) pauses the cyclic
collector only while it loads them, and leaves a process that has them alone."""

from __future__ import annotations

import gc
import json
import subprocess
import sys

from compiler import pipeline

_FRESH = """
import gc, json, sys
from compiler import pipeline
before = gc.get_freeze_count()
pipeline._import_fitting()
print(json.dumps({"enabled": gc.isenabled(), "frozen": gc.get_freeze_count() - before,
                  "loaded": "scipy.special" in sys.modules}))
"""


def test_a_fresh_process_gets_its_collector_back_after_the_imports():
    done = subprocess.run([sys.executable, "-c", _FRESH], capture_output=True, text=True,
                          check=True)
    state = json.loads(done.stdout)
    assert state == {"enabled": True, "frozen": state["frozen"], "loaded": True}
    assert state["frozen"] > 0  # the loaded libraries' objects are left out of later passes


def test_a_process_with_the_libraries_loaded_is_left_alone():
    pipeline._import_fitting()  # loads them here, if no earlier test has
    frozen = gc.get_freeze_count()
    pipeline._import_fitting()
    assert gc.isenabled() and gc.get_freeze_count() == frozen
