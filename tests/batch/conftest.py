"""Fixtures of the study and batch tests; the helpers live in batch_helpers.py beside this file."""

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from batch_helpers import make_landscape  # noqa: E402


@pytest.fixture
def landscape(tmp_path):
    return make_landscape(tmp_path)
