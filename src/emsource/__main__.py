"""``python -m emsource``: the same command line as the ``emsource`` script."""

import sys

from .cli import main

sys.exit(main())
