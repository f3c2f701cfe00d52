"""Tests for screening.snakemake_main and progress.EarlyWorkflow: the Snakemake process that
``screening run`` starts before its input checks.

Outside references: Python's documented ``sys.exit`` status rules (None -> 0, int -> itself, any other
object printed to stderr -> 1; Python Library Reference, ``sys.exit``) and Snakemake's own ``--version``
output, compared with ``python -m snakemake --version``.
"""
from __future__ import annotations

import json
import subprocess
import sys
import threading
import time

import pytest

from screening import progress, snakemake_main


def test_exit_status_follows_sys_exit_rules(capsys):
    # Python Library Reference, sys.exit: None is success, an int is the status, anything else is
    # printed to stderr and gives 1
    assert snakemake_main.exit_status(None) == 0
    assert snakemake_main.exit_status(0) == 0
    assert snakemake_main.exit_status(3) == 3
    assert snakemake_main.exit_status("workflow error") == 1
    assert "workflow error" in capsys.readouterr().err


def test_pending_timers_are_cancelled():
    fired = threading.Event()
    timer = threading.Timer(30.0, fired.set)
    timer.start()
    assert snakemake_main.cancel_pending_timers() >= 1
    timer.join(timeout=5)
    assert not timer.is_alive() and not fired.is_set()


def _wait_process(**kwargs):
    return subprocess.Popen([sys.executable, "-m", "screening.snakemake_main", snakemake_main.WAIT_FLAG],
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                            **kwargs)


def test_empty_stdin_ends_the_waiting_process_without_running_anything(tmp_path):
    process = _wait_process(cwd=tmp_path)
    out, _ = process.communicate("", timeout=120)
    assert process.returncode == 0, out
    assert out == ""
    assert list(tmp_path.iterdir()) == []  # no .snakemake folder, nothing written


def test_released_arguments_and_environment_reach_snakemake(tmp_path):
    # Snakemake's own answer to --version, as the plain `python -m snakemake` gives it
    expected = subprocess.run([sys.executable, "-m", "snakemake", "--version"], capture_output=True, text=True,
                              timeout=120).stdout.strip()
    process = _wait_process(cwd=tmp_path)
    out, _ = process.communicate(json.dumps({"argv": ["--version"], "environ": {"SCREENING_PROBE": "1"}}) + "\n",
                                 timeout=120)
    assert process.returncode == 0, out
    assert out.strip().splitlines()[-1] == expected


def test_early_workflow_discard_leaves_nothing(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    early = progress.EarlyWorkflow()
    time.sleep(0.2)  # let it get into its imports
    early.discard()
    assert early.process.returncode is not None
    assert list(tmp_path.iterdir()) == []


def test_early_workflow_runs_the_released_command(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    expected = subprocess.run([sys.executable, "-m", "snakemake", "--version"], capture_output=True, text=True,
                              timeout=120).stdout.strip()
    early = progress.EarlyWorkflow()
    lines = []

    class Stream:
        def write(self, text):
            lines.append(text)

        def flush(self):
            pass

    code = progress.run_workflow(["--version"], tmp_path / "out", after_s=None, stream=Stream(), echo=True,
                                 early=early)
    assert code == 0
    assert expected in "".join(lines)


def test_snakemake_failure_status_is_passed_on(tmp_path):
    process = _wait_process(cwd=tmp_path)
    out, _ = process.communicate(json.dumps({"argv": ["--nonsense-option"], "environ": {}}) + "\n", timeout=120)
    # Snakemake's argparse refuses an unknown option with status 2 (argparse's documented usage-error code)
    assert process.returncode == 2, out


def test_release_to_a_process_that_already_ended_is_a_clear_error(tmp_path, monkeypatch):
    from screening.errors import ScreeningError

    monkeypatch.chdir(tmp_path)
    early = progress.EarlyWorkflow()
    early.process.kill()
    early.process.wait()
    with pytest.raises(ScreeningError, match="ended .* before it was given its arguments"):
        early.release(["--version"])
