"""The SLURM profile builds the workflow's plan (dry-run) when the executor plugin is installed."""
from __future__ import annotations

import importlib.util
import re
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[1]
PROFILE = REPO / "workflow" / "profiles" / "slurm"
HAS_PLUGIN = importlib.util.find_spec("snakemake_executor_plugin_slurm") is not None


def test_profile_names_the_slurm_executor_and_every_stage():
    config = yaml.safe_load((PROFILE / "config.yaml").read_text())
    assert config["executor"] == "slurm"
    snakefile = (REPO / "workflow" / "Snakefile").read_text()
    stages = set(re.findall(r"^rule (\w+):", snakefile, re.M)) - {"all", "provenance"}
    # every stage that is submitted as a job has its own memory and wall time
    missing = {"prepare_hosts", "screen_shard", "edge_shard", "rank", "assemble"} - set(config["set-resources"])
    assert not missing, missing
    assert set(config["set-resources"]) <= stages
    for resources in config["set-resources"].values():
        assert resources["mem_mb"] > 0 and resources["runtime"] > 0


@pytest.mark.skipif(not HAS_PLUGIN, reason="snakemake-executor-plugin-slurm is not installed "
                                           "(pip install -e '.[cluster]' to run this test)")
def test_plan_builds_with_slurm_profile(small_screen, tmp_path):
    out = tmp_path / "results"
    done = subprocess.run([sys.executable, "-m", "snakemake", "--profile", str(PROFILE),
                           "--snakefile", str(REPO / "workflow" / "Snakefile"), "--directory", str(out),
                           "--config", f"ruleset={small_screen}", f"out={out}", "--dry-run"],
                          capture_output=True, text=True, cwd=tmp_path)
    text = done.stdout + done.stderr
    assert done.returncode == 0, text[-3000:]
    # 3 hosts in shards of 2: two shard jobs per stage, each with the profile's resources
    assert len(re.findall(r"^rule screen_shard:", text, re.M)) == 2
    block = text[text.index("rule screen_shard:"):]
    block = block[:block.index("\n\n") if "\n\n" in block else None]
    assert re.search(r"resources: .*mem_mb=4000.*runtime=30", block), block
    assert "This was a dry-run" in text
    assert not out.joinpath("shortlist.csv").exists()
