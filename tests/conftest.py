"""Shared test set-up: an isolated ion-table cache and a small screen for workflow tests."""
from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest

TESTS = Path(__file__).resolve().parent
REPO = TESTS.parent
DATA = TESTS / "data"


def pytest_configure(config):
    # One cache for the whole run, outside the user's home, so tests never read a stale table.
    if "SCREENING_CACHE_DIR" not in os.environ:
        os.environ["SCREENING_CACHE_DIR"] = str(Path(config.rootpath) / ".pytest_cache" / "screening-ions")


@pytest.fixture
def small_screen(tmp_path) -> Path:
    """A copy of the small rule set with its host library and pool; returns the rule-set path."""
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, tmp_path / name)
    return tmp_path / "small_rules.yaml"
