"""``python -m finitekey``: the same command line as the ``finitekey`` script."""

import sys

from .cli import main

sys.exit(main())
