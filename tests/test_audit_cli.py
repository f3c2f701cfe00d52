"""Tests for the `screening audit` sub-command (screening.audit), through an argparse harness."""

import argparse
import json

import pytest

from screening import audit
from screening.errors import ScreeningError

RULES_YAML = """\
scarcity:
  min_crust_ppm: 0.5
  exclude_radioactive: true
  max_cost_usd_per_kg: 500
  max_hhi_production: null
  max_hhi_reserves: null
"""


def run_audit(argv):
    parser = argparse.ArgumentParser()
    sub = parser.add_subparsers(dest="command")
    audit.register(sub)
    args = parser.parse_args(["audit", *argv])
    return audit.run(args)


@pytest.fixture
def rules_file(tmp_path):
    path = tmp_path / "rules.yaml"
    path.write_text(RULES_YAML)
    return path


def test_formula_table_shows_rhodium_row_and_failed_floor(capsys, rules_file):
    assert run_audit(["SrTi0.98Rh0.02O3", "--rules", str(rules_file)]) == 0
    out = capsys.readouterr().out
    rh_row = next(line for line in out.splitlines() if line.startswith("Rh "))
    # CRC Handbook via mendeleev: Rh 0.001 ppm; mendeleev price 1.47e5 USD/kg (Wikipedia, 2024)
    assert "0.001" in rh_row and "1.47e+05" in rh_row and "2024" in rh_row
    floor = next(line for line in out.splitlines() if line.startswith("min_crust_ppm"))
    assert floor.rstrip().endswith("FAIL")
    assert "overall: FAIL" in out
    assert "Rh has the lowest crustal abundance" in out


def test_formula_json_cost_equals_hand_calculation(capsys):
    # SrTi0.98Rh0.02O3 by hand with standard atomic weights and mendeleev prices (Wikipedia 2024):
    # (87.62*6.53 + 0.98*47.867*11.1 + 0.02*102.9055*147000 + 3*15.999*0.154) / 184.58477
    # = 303642.42 / 184.58477 = 1645.00 USD/kg
    assert run_audit(["SrTi0.98Rh0.02O3", "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    by_hand = (87.62 * 6.53 + 0.98 * 47.867 * 11.1 + 0.02 * 102.9055 * 147000 + 3 * 15.999 * 0.154) / (
        87.62 + 0.98 * 47.867 + 0.02 * 102.9055 + 3 * 15.999)
    assert result["summary"]["cost_usd_per_kg"] == pytest.approx(by_hand, rel=1e-9)
    assert result["summary"]["scarcest_element"] == "Rh"
    assert [e["symbol"] for e in result["elements"]] == ["Sr", "Ti", "Rh", "O"]
    o_row = result["elements"][3]
    # mendeleev (RSC table) has no relative supply risk for O: reported as null, not NaN
    assert o_row["supply_risk"] is None
    assert result["checks"] == [] and result["passed"] is None


def test_cautions_are_printed_for_flagged_elements(capsys):
    run_audit(["Sr0.98La0.02Ti0.98Cr0.02O3"])
    out = capsys.readouterr().out
    assert "Cautions:" in out
    assert any(line.strip().startswith("Cr:") and "Cr(VI)" in line for line in out.splitlines())


def test_shortlist_json_counts_listed_elements(capsys, tmp_path, rules_file):
    # Counts by hand from the EU 2024/1252 and USGS 2022 lists: Ti in 3 candidates, Sr in 2,
    # Rh, Ga, In and Sn in one each (In and Sn: USGS 2022 indium and tin); O on no list.
    path = tmp_path / "short.csv"
    path.write_text("host,formula\nTiO2,TiO2\nSrTiO3,SrTi0.98Rh0.02O3\nSrTiO3,SrTiO3\n"
                    "Ga2O3,Ga2O3\nIn2O3,In1.98Sn0.02O3\n")
    assert run_audit([str(path), "--rules", str(rules_file), "--json"]) == 0
    result = json.loads(capsys.readouterr().out)
    counts = {e["symbol"]: e["candidates"] for e in result["summary"]["elements"]}
    assert counts == {"Ti": 3, "Sr": 2, "Rh": 1, "Ga": 1, "In": 1, "Sn": 1}
    assert [c["host"] for c in result["candidates"]] == ["TiO2", "SrTiO3", "SrTiO3", "Ga2O3", "In2O3"]


def test_shortlist_table_lists_each_candidate(capsys, tmp_path):
    path = tmp_path / "short.csv"
    path.write_text("host,formula\nTiO2,TiO2\nSrTiO3,SrTi0.98Rh0.02O3\n")
    run_audit([str(path)])
    out = capsys.readouterr().out
    assert "2 candidate(s)" in out
    assert any("SrTi0.98Rh0.02O3" in line and "Rh (0.001)" in line for line in out.splitlines())


@pytest.mark.parametrize("target, message", [
    ("Xx2O3", "unknown element symbol 'Xx'"),
    ("", "empty formula"),
    ("Ti(O2", "unbalanced"),
    ("TiO₂", "Unicode subscript"),
])
def test_bad_formula_raises(target, message):
    with pytest.raises(ScreeningError, match=message):
        run_audit([target])


def test_shortlist_missing_columns_raises(tmp_path):
    path = tmp_path / "short.csv"
    path.write_text("name,composition\nTiO2,TiO2\n")
    with pytest.raises(ScreeningError, match=r"short\.csv.*missing required column\(s\) host, formula"):
        run_audit([str(path)])


def test_missing_shortlist_file_raises(tmp_path):
    with pytest.raises(ScreeningError, match="not found"):
        run_audit([str(tmp_path / "absent.csv")])


def test_rules_without_scarcity_section_or_out_of_range_raise(tmp_path):
    no_section = tmp_path / "plain.yaml"
    no_section.write_text("name: demo\n")
    with pytest.raises(ScreeningError, match=r"plain\.yaml.*scarcity"):
        run_audit(["TiO2", "--rules", str(no_section)])
    out_of_range = tmp_path / "range.yaml"
    out_of_range.write_text("scarcity:\n  max_hhi_reserves: -5\n")
    with pytest.raises(ScreeningError, match=r"range\.yaml.*max_hhi_reserves"):
        run_audit(["TiO2", "--rules", str(out_of_range)])
