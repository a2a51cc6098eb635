"""Fault tests import their scenarios from this folder. (Their guard that no link thread
ends with an unhandled exception, ``thread_errors``, is in tests/conftest.py.)"""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
