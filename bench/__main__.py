"""``python -m bench``: the same as the ``rigbench`` console script."""

import sys

from bench.cli import main

sys.exit(main())
