"""Fixtures of the study and batch tests; the shared functions live in study_fixtures.py beside this file."""

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))

from study_fixtures import make_landscape  # noqa: E402


@pytest.fixture
def landscape(tmp_path):
    return make_landscape(tmp_path)
