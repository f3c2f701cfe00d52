"""An interrupted screen resumes and gives the same shortlist (issue 9, item 3).

Internal behaviour of the tool only: no published value is checked here.

A researcher presses Ctrl-C on ``screening run`` (or a shared machine's scheduler stops it) while the
screen is part-way: the terminal sends SIGINT to the whole foreground process group, so both the
``screening`` process and the Snakemake process it started receive it.  The test does the same on the
small screen -- it starts ``screening run`` in its own process group, waits until the first stage
(``prepare_hosts``) has written its output and a ``screen_shard`` job has started, and signals the
group -- then runs the same command again and compares the outputs with those of an uninterrupted
chain of the same stage functions (``screening.pipeline``, called as the Snakefile calls them).

Why no stage can read a half-written file (see README, "Robustness"):

* every stage writes to a temporary name beside the target and renames it into place with
  ``os.replace`` (atomic on POSIX file systems), so a reader sees the old file or the whole new one;
  ``test_atomic_write_leaves_no_partial_file`` checks that a writer dying part-way leaves no target;
* Snakemake marks the outputs of every job it starts as incomplete until the job succeeds; after an
  interruption ``--rerun-incomplete`` (always passed by ``screening run``) reruns those jobs instead of
  trusting their files, and outputs are never taken as inputs while so marked.
"""
from __future__ import annotations

import base64
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from screening import pipeline, rulesets

DATA = Path(__file__).resolve().parent / "data"
TIMEOUT_S = 240


def _screening(*argv) -> list[str]:
    return [sys.executable, "-m", "screening", *argv]


def _incomplete_marks(out: Path) -> set[Path]:
    """Files Snakemake has flagged as incomplete (names under .snakemake/incomplete are base64 paths)."""
    marks = set()
    folder = out / ".snakemake" / "incomplete"
    for mark in folder.iterdir() if folder.is_dir() else []:
        try:
            marks.add(Path(base64.b64decode(mark.name.encode()).decode()))
        except (ValueError, UnicodeDecodeError):
            continue
    return marks


def _readable(path: Path) -> bool:
    try:
        if path.suffix == ".parquet":
            pd.read_parquet(path)
        elif path.suffix == ".csv":
            pd.read_csv(path)
        elif path.suffix == ".json":
            json.loads(path.read_text())
        return True
    except Exception:  # noqa: BLE001 -- any failure to read means a damaged file, which is the question
        return False


def _uninterrupted_chain(rules_path: Path, out: Path) -> Path:
    """The stage functions in the Snakefile's order with the Snakefile's params; returns the output folder."""
    rules = rulesets.load_ruleset(rules_path)
    stages = out / "stages"
    size = rules.sections["workflow"]["shard_size"]
    hosts = pipeline.prepare_hosts(rules.hosts_path, size, stages / "hosts.json")
    shards = [stages / f"shard_{i}" for i in range(pipeline.shard_count(len(hosts), size))]
    for i, shard in enumerate(shards):
        pipeline.screen_shard(stages / "hosts.json", i, rules.pool_path, rules.section("enumeration"),
                              rules.section("filters"), rules.section("scarcity"), shard / "kept.parquet",
                              shard / "rejected.parquet", shard / "funnel.csv")
        pipeline.edge_shard(stages / "hosts.json", i, shard / "kept.parquet",
                            rules.sections["filters"]["radius_mismatch"]["max_relative"], shard / "edges.parquet")
    pipeline.rank(stages / "hosts.json", [s / "kept.parquet" for s in shards], [s / "edges.parquet" for s in shards],
                  rules.section("alignment"), rules.section("ranking"),
                  rules.sections["filters"]["radius_mismatch"]["max_relative"], stages / "ranked.parquet",
                  stages / "alignment_rejected.parquet", stages / "alignment_funnel.csv")
    pipeline.assemble(stages / "ranked.parquet",
                      [s / "rejected.parquet" for s in shards] + [stages / "alignment_rejected.parquet"],
                      [s / "funnel.csv" for s in shards] + [stages / "alignment_funnel.csv"],
                      out / "shortlist.csv", out / "rejected.parquet", out / "funnel.csv")
    return out


@pytest.fixture(scope="module")
def interrupted(tmp_path_factory):
    """Start the small screen, interrupt it part-way with SIGINT to its process group; return what is left."""
    root = tmp_path_factory.mktemp("interrupt")
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, root / name)
    rules, out = root / "small_rules.yaml", root / "out"
    command = _screening("run", "--rules", str(rules), "--out", str(out), "--cores", "2")
    process = subprocess.Popen(command, start_new_session=True, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                               text=True, cwd=root)
    deadline = time.monotonic() + TIMEOUT_S
    first_output = out / "stages" / "hosts.json"
    started = out / "logs" / "screen_shard_0.log"
    while not (first_output.exists() and started.exists()):
        assert process.poll() is None, f"the screen ended before it could be interrupted: {process.communicate()}"
        assert time.monotonic() < deadline, "the screen never reached its first stage output"
        time.sleep(0.05)
    time.sleep(0.3)  # let the screen_shard jobs get into their work
    os.killpg(process.pid, signal.SIGINT)
    try:
        stdout, stderr = process.communicate(timeout=120)
    except subprocess.TimeoutExpired:
        os.killpg(process.pid, signal.SIGKILL)
        raise
    return {"root": root, "rules": rules, "out": out, "command": command, "returncode": process.returncode,
            "stdout": stdout, "stderr": stderr}


def test_interrupted_screen_resumes_with_the_same_results(interrupted):
    out = interrupted["out"]
    # it really stopped part-way: non-zero exit, no final outputs yet
    assert interrupted["returncode"] != 0
    assert not (out / "shortlist.csv").exists()
    # Snakemake released its lock (a stale lock would refuse the rerun until --unlock)
    locks = out / ".snakemake" / "locks"
    assert not locks.is_dir() or not any(locks.iterdir()), sorted(p.name for p in locks.iterdir())
    # every stage output left behind is whole, or flagged for rerun
    marks = _incomplete_marks(out)
    for path in sorted((out / "stages").rglob("*")):
        if path.is_file() and not path.name.startswith("."):
            assert _readable(path) or path.resolve() in marks, f"half-written, unflagged: {path}"

    rerun = subprocess.run(interrupted["command"], capture_output=True, text=True, timeout=TIMEOUT_S,
                           cwd=interrupted["root"])
    assert rerun.returncode == 0, rerun.stderr[-3000:]
    assert _incomplete_marks(out) == set()

    reference = _uninterrupted_chain(interrupted["rules"], interrupted["root"] / "reference")
    assert (out / "shortlist.csv").read_bytes() == (reference / "shortlist.csv").read_bytes()
    assert (out / "funnel.csv").read_bytes() == (reference / "funnel.csv").read_bytes()
    pd.testing.assert_frame_equal(pd.read_parquet(out / "rejected.parquet"),
                                  pd.read_parquet(reference / "rejected.parquet"))
    assert len(pd.read_csv(out / "shortlist.csv")) > 0  # a comparison of two empty lists would prove little


def test_interrupted_screen_says_so_in_one_line(interrupted):
    assert "Traceback" not in interrupted["stderr"]
    assert interrupted["returncode"] == 130


def test_atomic_write_leaves_no_partial_file(tmp_path, monkeypatch):
    target = tmp_path / "kept.parquet"
    good = pd.DataFrame({"candidate_id": ["a", "b"], "score": [1.0, 2.0]})
    pipeline.write_parquet(good, target)

    def dies_half_way(self, path, *args, **kwargs):
        Path(path).write_bytes(b"PAR1 half a file")
        raise OSError("disk full")

    monkeypatch.setattr(pd.DataFrame, "to_parquet", dies_half_way)
    with pytest.raises(OSError, match="disk full"):
        pipeline.write_parquet(pd.DataFrame({"candidate_id": ["c"], "score": [3.0]}), target)
    monkeypatch.undo()
    # the reader still sees the whole previous file, never the half-written one
    pd.testing.assert_frame_equal(pd.read_parquet(target), good)
    fresh = tmp_path / "new.csv"
    monkeypatch.setattr(pd.DataFrame, "to_csv", lambda self, path, *a, **k: (Path(path).write_text("candidate_id,sc"),
                                                                             (_ for _ in ()).throw(OSError("killed"))))
    with pytest.raises(OSError, match="killed"):
        pipeline.write_csv(good, fresh)
    assert not fresh.exists()
