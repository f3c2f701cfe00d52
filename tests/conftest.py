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


class _UnreleasedWorkflow:
    """Stands in for screening.progress.EarlyWorkflow: any attempt to hand it arguments fails the test."""

    instances: list = []

    def __init__(self):
        import types

        self.discarded = False
        # the attributes screening.cli looks at before it discards the process
        self.process = types.SimpleNamespace(returncode=None, stdin=types.SimpleNamespace(closed=False))
        _UnreleasedWorkflow.instances.append(self)

    def release(self, argv):
        raise AssertionError(f"validation let bad input through: the workflow was released with {argv[:6]}")

    def discard(self):
        self.discarded = True


@pytest.fixture
def no_workflow_release(monkeypatch):
    """``screening run`` starts its Snakemake process before the input checks (screening.snakemake_main);
    this replaces that process by a stand-in that fails the test if it is ever given arguments.
    Returns the list of stand-ins made, to check that each was discarded."""
    from screening import progress

    _UnreleasedWorkflow.instances = []
    monkeypatch.setattr(progress, "EarlyWorkflow", _UnreleasedWorkflow)
    return _UnreleasedWorkflow.instances
