"""``python -m ampplan``: the command line (see :mod:`ampplan.cli`)."""

import sys

from .cli import main

sys.exit(main())
