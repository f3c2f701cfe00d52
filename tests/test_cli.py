"""The command line: edges, help, error handling."""
from __future__ import annotations

import json
import subprocess
import sys

import pytest

from screening import cli


def test_edges_json_for_titanium_dioxide(capsys):
    # Xu & Schoonen, Am. Mineral. 85 (2000) 543: TiO2 chi 5.81 eV, Eg 3.2 eV -> E_CB -0.29 V, E_VB 2.91 V vs NHE.
    assert cli.main(["edges", "TiO2", "--gap", "3.2", "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert {"chi_ev", "cbm_v_nhe", "vbm_v_nhe", "sth_limit"} <= set(result)
    assert result["chi_ev"] == pytest.approx(5.81, abs=0.01)
    assert result["cbm_v_nhe"] == pytest.approx(-0.29, abs=0.01)
    assert result["vbm_v_nhe"] == pytest.approx(2.91, abs=0.01)
    # AM1.5G limit of a 3.2 eV absorber: about 1.3 % (common practice)
    assert result["sth_limit"] == pytest.approx(0.013, abs=0.002)


def test_edges_shift_with_ph(capsys):
    # Nernstian oxide edges: -0.0592 V per pH unit (common practice).
    cli.main(["edges", "ZnO", "--gap", "3.2", "--json"])
    at_0 = json.loads(capsys.readouterr().out)
    cli.main(["edges", "ZnO", "--gap", "3.2", "--ph", "7", "--json"])
    at_7 = json.loads(capsys.readouterr().out)
    assert at_7["cbm_v_nhe"] - at_0["cbm_v_nhe"] == pytest.approx(-0.0592 * 7, abs=1e-3)


@pytest.mark.parametrize("formula", ["", "Xx2O3", "TiO₂", "Ti0O2", "Ti(O2"])
def test_edges_bad_formula_is_one_line_and_exit_2(capsys, formula):
    assert cli.main(["edges", formula, "--gap", "3.0"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("screening: error:") and err.count("\n") == 1


def test_module_entry_point_and_help():
    done = subprocess.run([sys.executable, "-m", "screening", "--help"], capture_output=True, text=True)
    assert done.returncode == 0 and "edges" in done.stdout and "run" in done.stdout


def test_run_with_bad_rule_set_writes_nothing(tmp_path, capsys):
    rules = tmp_path / "bad.yaml"
    rules.write_text("name: bad\nhosts: nowhere.yaml\ndopant_pool: nowhere.yaml\n")
    out = tmp_path / "results"
    assert cli.main(["run", "--rules", str(rules), "--out", str(out)]) == 2
    assert "hosts" in capsys.readouterr().err
    assert not out.exists()


def test_shard_advice_only_for_local_runs_with_many_shards():
    # The threshold is the project's own measurement (README "Speed and scale": 1,000 hosts on 2 cores took
    # 93-114 s in 40 shards and 40-68 s in 8), not an outside value: the check is of the arithmetic.
    note = cli.shard_advice(1000, 25, 2, "")
    assert note is not None and "40 shards of 25 hosts" in note and "about 125" in note  # ceil(1000 / 8)
    assert cli.shard_advice(25, 7, 2, "") is None          # the default screen: 4 shards
    assert cli.shard_advice(160, 10, 2, "") is None        # 16 shards = twice the advice: still quiet
    assert cli.shard_advice(170, 10, 2, "") is not None    # 17
    assert cli.shard_advice(1000, 25, 2, "--profile workflow/profiles/slurm") is None
    assert cli.shard_advice(1000, 25, 2, "--executor slurm") is None
    assert cli.shard_advice(1000, 25, 2, "-e slurm") is None
    assert cli.shard_advice(1000, 25, 2, "--profile=workflow/profiles/slurm") is None
    # a flag that merely contains the letters is a local run (the check is on whole arguments)
    assert cli.shard_advice(1000, 25, 2, "--keep-going --rerun-triggers mtime") is not None
