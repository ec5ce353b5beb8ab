"""What the benchmark scripts share: the environment of the processes they time."""

from __future__ import annotations

import os
import subprocess
import sys

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def env() -> dict:
    """The environment of a timed process: this checkout first on the module path, Python's bytecode cache on.

    A user's install keeps audition's compiled modules (``__pycache__``). With
    PYTHONDONTWRITEBYTECODE in the caller's environment (some sandboxes and CI
    images set it) every timed process would compile them again, about 70 ms
    of start-up a user never pays, so it is left out here.
    """
    e = dict(os.environ)
    e.pop("PYTHONDONTWRITEBYTECODE", None)
    e["PYTHONPATH"] = ROOT + (os.pathsep + e["PYTHONPATH"] if e.get("PYTHONPATH") else "")
    return e


def compile_modules() -> None:
    """Compile audition's modules into the bytecode cache first, as pip does when it installs a package."""
    subprocess.run([sys.executable, "-m", "compileall", "-q", os.path.join(ROOT, "audition")], env=env(), check=True,
                   stdout=subprocess.DEVNULL)
