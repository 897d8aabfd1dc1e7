"""The environment a run happened in: versions of everything that can change a number or a byte.

Versions come from the installed distributions' metadata, so nothing heavy is imported.
The platform is the operating system and machine only (``linux-x86_64``), not the kernel
release, which changes under CI runners without changing any result.
"""

from __future__ import annotations

import platform
import sys
from importlib import metadata

from . import __version__

# Numbers come from the first group; report bytes also depend on the second.
NUMERICAL = ("numpy", "scipy", "pandas", "statsmodels", "pyarrow")
RENDERING = ("jinja2", "matplotlib", "weasyprint")


def environment() -> dict[str, str]:
    env = {"prespec": __version__,
           "python": f"{platform.python_implementation()} {platform.python_version()}",
           "platform": f"{sys.platform}-{platform.machine()}"}
    for name in NUMERICAL + RENDERING:
        env[name] = _version(name)
    return env


def _version(distribution: str) -> str:
    try:
        return metadata.version(distribution)
    except metadata.PackageNotFoundError:
        return "not installed"
