"""``python -m rigbench``: the same as the ``rigbench`` console script."""

import sys

from rigbench.cli import main

sys.exit(main())
