"""Shared test set-up: makes ``tests/`` importable so that helpers such as
``standin`` can be imported from test files in any sub-folder."""

import sys
from pathlib import Path

_TESTS = str(Path(__file__).resolve().parent)
if _TESTS not in sys.path:
    sys.path.insert(0, _TESTS)
