"""``python -m conditioning ...``: the same command as the ``conditioning`` entry point."""

import sys

from conditioning.cli import main

sys.exit(main())
