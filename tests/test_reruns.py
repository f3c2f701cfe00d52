"""Targeted reruns: a change of one criterion reruns exactly the stages that use it.

One real run of the small screen, then one Snakemake dry-run per changed
criterion, read from Snakemake's own plan (the `rule NAME:` blocks and their
`reason:` lines that `snakemake --dry-run` prints). The dry-runs of the
different changes run side by side (`--nolock`: a dry-run writes nothing).
The expected sets are the README table "What a change reruns"; a test checks
that the README says the same.
"""
from __future__ import annotations

import os
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from screening import cli

REPO = Path(__file__).resolve().parents[1]
SNAKEFILE = REPO / "workflow" / "Snakefile"
# Plans and the first run stop at provenance.json (a Snakemake target): the report rule
# (issue 7) only reads provenance.json and the shortlist, so it reruns whenever provenance does
# (the README table says so) and building its figures would take most of the test's time.
AFTER = {"provenance"}
TARGET = "provenance.json"
FROM_SHARDS = {"screen_shard", "edge_shard", "rank", "assemble"}
EXPECTED = {
    "workflow": ({"workflow.shard_size": 1}, {"prepare_hosts"} | FROM_SHARDS | AFTER, {"prepare_hosts"}),
    "enumeration": ({"enumeration.dopant_fraction": 0.03}, FROM_SHARDS | AFTER, {"screen_shard"}),
    "filters": ({"filters.charge_balance.max_ratio": 1}, FROM_SHARDS | AFTER, {"screen_shard"}),
    "scarcity": ({"scarcity.max_cost_usd_per_kg": 400}, FROM_SHARDS | AFTER, {"screen_shard"}),
    "alignment": ({"alignment.ph": 5.0}, {"rank", "assemble"} | AFTER, {"rank"}),
    "ranking": ({"ranking.weights.cost": 0.6}, {"rank", "assemble"} | AFTER, {"rank"}),
    "description": ({"description": "same criteria, other words"}, AFTER, set()),
}
BLOCK = re.compile(r"^rule (\w+):\n(.*?)(?=^\S|\Z)", re.M | re.S)


def _changed_copy(rules: Path, name: str, changes: dict) -> Path:
    document = yaml.safe_load(rules.read_text())
    for dotted, value in changes.items():
        node = document
        *parents, last = dotted.split(".")
        for key in parents:
            node = node.setdefault(key, {})
        node[last] = value
    path = rules.with_name(f"changed_{name}.yaml")  # beside the original: same relative host and pool paths
    path.write_text(yaml.safe_dump(document, sort_keys=False))
    return path


def _dry_run(rules: Path, out: Path) -> subprocess.Popen:
    command = [sys.executable, "-m", "snakemake", str(out / TARGET), "--snakefile", str(SNAKEFILE),
               "--directory", str(out), "--cores", "1", "--dry-run", "--nolock",
               "--config", f"ruleset={rules}", f"out={out}"]
    return subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                            env={**os.environ, "SCREENING_COMMAND": "test"})


def plan(text: str) -> dict[str, set[str]]:
    """rule -> set of reasons, from a Snakemake dry-run printout."""
    jobs: dict[str, set[str]] = {}
    for name, body in BLOCK.findall(text):
        reason = re.search(r"^\s+reason: (.*)$", body, re.M)
        jobs.setdefault(name, set()).add(reason.group(1) if reason else "")
    jobs.pop("all", None)
    return jobs


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    data = Path(__file__).resolve().parent / "data"  # the files of conftest's small_screen

    folder = tmp_path_factory.mktemp("reruns")
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        (folder / name).write_bytes((data / name).read_bytes())
    rules, out = folder / "small_rules.yaml", folder / "results"
    # threads instead of one process per job: the plan does not depend on it, and it saves ~8 s a job
    code = cli.main(["run", "--rules", str(rules), "--out", str(out), "--cores", "2",
                     f"--snakemake-args=--force-use-threads {out / TARGET}"])
    assert code == 0
    return rules, out


@pytest.fixture(scope="module")
def plans(screened):
    rules, out = screened
    runs = {name: _dry_run(_changed_copy(rules, name, changes), out)
            for name, (changes, _, _) in EXPECTED.items()}
    runs["unchanged"] = _dry_run(rules, out)
    texts = {}
    for name, process in runs.items():
        text, _ = process.communicate(timeout=300)
        assert process.returncode == 0, text[-3000:]
        texts[name] = text
    return texts


@pytest.mark.workflow
@pytest.mark.parametrize("section", list(EXPECTED))
def test_one_change_reruns_exactly_the_dependent_stages(plans, section):
    _, expected_rules, touched = EXPECTED[section]
    jobs = plan(plans[section])
    assert set(jobs) == expected_rules, plans[section][-4000:]
    for name, reasons in jobs.items():
        text = " ".join(reasons)
        # Snakemake names one reason a job: its own changed params (its inputs unchanged), or
        # else updated inputs; provenance's params change with any edit of the rule-set file
        if name in touched or (name == "provenance" and not touched):
            assert "Params have changed since last execution" in text, (name, reasons)
        else:
            assert "Params have changed" not in text and "updated by another job" in text, (name, reasons)


@pytest.mark.workflow
def test_no_change_plans_nothing(plans):
    assert plan(plans["unchanged"]) == {}
    assert "Nothing to be done" in plans["unchanged"]


def test_readme_table_matches_expectations():
    readme = (REPO / "README.md").read_text(encoding="utf-8")
    for section in ("workflow", "enumeration", "filters", "scarcity", "alignment", "ranking"):
        row = re.search(rf"^\| `{section}\.\*` \| (.*?) \|$", readme, re.M)
        assert row, f"README has no row for {section}.*"
        stages = {s.strip() for s in row.group(1).split(",")}
        assert stages == EXPECTED[section][1] | {"provenance", "report"}, section


def test_plan_parser_reads_snakemake_blocks():
    # a fragment in the layout Snakemake 9.27 prints for a dry-run
    text = ("rule rank:\n    input: a\n    reason: Params have changed since last execution\n"
            "    resources: tmpdir=/tmp\n[Tue Dec  1 19:51:23 2026]\n"
            "rule assemble:\n    reason: Input files updated by another job: x\n\n"
            "rule all:\n    reason: Input files updated by another job: y\n")
    assert plan(text) == {"rank": {"Params have changed since last execution"},
                          "assemble": {"Input files updated by another job: x"}}
