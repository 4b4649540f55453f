"""``python -m emsource``: the same command line as the ``emsource`` script."""

import sys

from .cli import main

if __name__ == "__main__":  # importing this module (documentation tools, tests) runs nothing
    sys.exit(main())
