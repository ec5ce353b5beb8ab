"""One exception root for everything the user can get wrong.

The command line turns an :class:`AuditionError` into one line on stderr and
exit status 2. Any other exception is a bug and may show a traceback.
"""


class AuditionError(Exception):
    """Root of the errors a user can cause (bad value, bad file, refused output)."""


class BadParameter(AuditionError, ValueError):
    """A parameter outside its allowed range; the message names it and the range."""


class BadInputFile(AuditionError):
    """An input file that is missing, unreadable, corrupt or of an unsupported kind."""


class OutputRefused(AuditionError):
    """An output that would overwrite the input, an existing file, or cannot be written."""


class NumericalWarning(UserWarning):
    """A result that is numerically doubtful (for example poles very near the unit circle)."""
