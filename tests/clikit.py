"""The command line in a child process, bounded in time: for the inputs that could hang a
read (a FIFO, a device) or must see the real executable's signals and pipes."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

TESTS = Path(__file__).resolve().parent
LIMIT = 60  # seconds: every such test ends, hang or not


def prespec(*args, timeout: float = LIMIT, **options) -> subprocess.CompletedProcess:
    """``prespec ARGS`` as the executable runs it (compiler.cli.command)."""
    return subprocess.run([sys.executable, "-m", "compiler", *map(str, args)],
                          capture_output=True, text=True, timeout=timeout,
                          env={**os.environ, **options.pop("env", {})}, **options)
