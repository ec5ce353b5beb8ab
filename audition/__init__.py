"""audition: choose, render, measure and audition hiss filters for restoration work.

The package is laid out along the flow of the work::

    io -> survey -> measure -> plan -> design -> render -> io

The DSP core (:mod:`audition.design`, :mod:`audition.weighting`,
:mod:`audition.survey`, :mod:`audition.measure`) takes arrays and numbers and
returns arrays, numbers and small frozen dataclasses; only :mod:`audition.cli`
parses arguments, prints and chooses exit codes.
"""

__version__ = "0.1.0"

from audition.errors import AuditionError, BadInputFile, BadParameter, OutputRefused  # noqa: E402

__all__ = ["AuditionError", "BadInputFile", "BadParameter", "OutputRefused", "__version__"]
