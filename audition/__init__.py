"""audition: choose, render, measure and audition hiss filters for restoration work.

The package is laid out along the flow of the work::

    io -> survey -> measure -> plan -> design -> render -> io

The DSP core (:mod:`audition.design`, :mod:`audition.weighting`,
:mod:`audition.survey`, :mod:`audition.measure`) takes arrays and numbers and
returns arrays, numbers and small frozen dataclasses; only :mod:`audition.cli`
parses arguments, prints and chooses exit codes.
"""

import os as _os
import sys as _sys


def _run_as_command() -> bool:
    """Whether this process is the ``audition`` command (its script, or ``python -m audition``)."""
    if _sys.argv[:1] == ["-m"]:  # runpy is importing the package named after -m
        argv = getattr(_sys, "orig_argv", [])
        return "-m" in argv[:-1] and argv[argv.index("-m") + 1] == "audition"
    return bool(_sys.argv) and _os.path.basename(_sys.argv[0]) in ("audition", "audition.exe")


if _run_as_command():
    # Ctrl-C or SIGTERM during the command's own imports: recorded here, acted on by cli.main
    from audition import interrupt as _interrupt

    _interrupt.install_early()

__version__ = "0.1.0"

from audition.errors import AuditionError, BadInputFile, BadParameter, OutputRefused  # noqa: E402

__all__ = ["AuditionError", "BadInputFile", "BadParameter", "OutputRefused", "__version__"]
