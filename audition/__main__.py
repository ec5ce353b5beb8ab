"""``python -m audition`` is the same as the ``audition`` command."""

import sys

from audition.cli import main

sys.exit(main())
