"""Progress of a screen: parsed from Snakemake's own output and the stage logs; quiet for a short run.

Internal behaviour of the tool only: no published value is checked here.
"""
from __future__ import annotations

import io
import sys
import textwrap
import time

import pytest

from screening import cli, progress

# Lines exactly as Snakemake 9.27 printed them for `screening run` of the default screen
# (captured from a real run on the development machine, 2026-12-01).
SNAKEMAKE_OUTPUT = """\
Building DAG of jobs...
Using shell: /usr/bin/bash
Provided cores: 2
Rules claiming more threads will be scaled down.
Job stats:
job              count
-------------  -------
prepare_hosts        1
screen_shard         4
edge_shard           4
rank                 1
assemble             1
all                  1
total               12

Select jobs to execute...
Execute 1 jobs...
Finished jobid: 3 (Rule: prepare_hosts)
1 of 12 steps (8%) done
Select jobs to execute...
Execute 2 jobs...
Finished jobid: 2 (Rule: screen_shard)
2 of 12 steps (17%) done
"""


def test_state_reads_snakemakes_job_accounting():
    state = progress.State()
    for line in SNAKEMAKE_OUTPUT.splitlines(keepends=True):
        state.feed(line)
    assert state.planned == {"prepare_hosts": 1, "screen_shard": 4, "edge_shard": 4, "rank": 1, "assemble": 1,
                             "all": 1}
    assert (state.done, state.total) == (2, 12)
    assert state.finished == {"prepare_hosts": 1, "screen_shard": 1}
    line = progress.status_line(state, {"shards": 0, "enumerated": 0, "kept": 0, "ranked": None}, 75)
    assert line == "screening: 2/12 steps done (screen_shard 1/4, edge_shard 0/4) · 1:15"


def _fake_workflow(tmp_path, *, pause: float, fail: bool = False) -> list[str]:
    """A stand-in for Snakemake: prints its accounting and writes a shard log as the stage would."""
    script = tmp_path / "fake_snakemake.py"
    script.write_text(textwrap.dedent(f"""
        import sys, time
        from pathlib import Path
        lines = {SNAKEMAKE_OUTPUT!r}.splitlines()
        logs = Path({str(tmp_path / "out" / "logs")!r})
        logs.mkdir(parents=True, exist_ok=True)
        for line in lines:
            print(line, flush=True)
            if line.startswith("Finished jobid: 2"):
                (logs / "screen_shard_0.log").write_text(
                    "INFO shard 0: 7 hosts, 220858 candidates enumerated, 1051 kept\\n")
            time.sleep({pause} / len(lines))
        if {fail}:
            print("RuleException: something broke in rank", flush=True)
            sys.exit(1)
    """))
    return [sys.executable, str(script)]


def test_long_run_shows_stages_and_candidates(tmp_path):
    stream = io.StringIO()
    code = progress.run_workflow(_fake_workflow(tmp_path, pause=2.0), tmp_path / "out", after_s=0.0, stream=stream)
    assert code == 0
    shown = stream.getvalue()
    assert "2/12 steps done" in shown
    assert "220,858 candidates enumerated, 1,051 kept" in shown
    assert "Building DAG" not in shown  # Snakemake's chatter is held back on success


def test_short_run_stays_quiet(tmp_path):
    stream = io.StringIO()
    code = progress.run_workflow(_fake_workflow(tmp_path, pause=0.5), tmp_path / "out", after_s=30.0, stream=stream)
    assert code == 0 and stream.getvalue() == ""


def test_failure_prints_snakemakes_output(tmp_path):
    stream = io.StringIO()
    code = progress.run_workflow(_fake_workflow(tmp_path, pause=0.2, fail=True), tmp_path / "out", after_s=30.0,
                                 stream=stream)
    assert code == 1
    assert "RuleException: something broke in rank" in stream.getvalue()
    assert "Job stats:" in stream.getvalue()


def test_old_logs_do_not_count(tmp_path):
    logs = tmp_path / "logs"
    logs.mkdir()
    (logs / "screen_shard_0.log").write_text("shard 0: 3 hosts, 100 candidates enumerated, 10 kept\n")
    since = time.time() + 5
    assert progress.candidates_processed(logs, since)["shards"] == 0
    # threads share a logger, so a log may hold another shard's line: each shard counts once
    (logs / "screen_shard_1.log").write_text("shard 0: 3 hosts, 100 candidates enumerated, 10 kept\n"
                                             "shard 1: 2 hosts, 50 candidates enumerated, 5 kept\n")
    counts = progress.candidates_processed(logs, 0)
    assert (counts["shards"], counts["enumerated"], counts["kept"]) == (2, 150, 15)


@pytest.mark.parametrize("env, expected", [({}, 15.0), ({"SCREENING_PROGRESS": "never"}, None),
                                           ({"SCREENING_PROGRESS": "always"}, 0.0),
                                           ({"SCREENING_PROGRESS_AFTER": "2.5"}, 2.5)])
def test_delay_from_env(monkeypatch, env, expected):
    monkeypatch.delenv("SCREENING_PROGRESS", raising=False)
    monkeypatch.delenv("SCREENING_PROGRESS_AFTER", raising=False)
    for key, value in env.items():
        monkeypatch.setenv(key, value)
    assert progress.delay_from_env() == expected


def test_bad_progress_setting_is_refused(monkeypatch):
    monkeypatch.setenv("SCREENING_PROGRESS", "loud")
    with pytest.raises(progress.ScreeningError, match="SCREENING_PROGRESS"):
        progress.delay_from_env()


def test_real_workflow_shows_progress_and_writes_the_report(small_screen, tmp_path, capfd, monkeypatch):
    """One real run through Snakemake: the status line, the report rule and its figures."""
    monkeypatch.setenv("SCREENING_PROGRESS", "always")
    out = tmp_path / "results"
    assert cli.main(["run", "--rules", str(small_screen), "--out", str(out), "--cores", "2"]) == 0
    err = capfd.readouterr().err
    assert "steps done" in err and "candidates enumerated" in err
    assert (out / "report.html").is_file() and (out / "logs" / "report.log").is_file()
    for name in ("funnel", "alignment", "sth", "scarcity"):
        assert (out / "figures" / f"{name}.svg").is_file() and (out / "figures" / f"{name}.png").is_file()
    assert "stage report finished" in (out / "logs" / "report.log").read_text()
