"""Run the command line as ``python -m teffmc`` (the same as the ``teffmc`` command)."""

import sys

from .cli import main

sys.exit(main())
