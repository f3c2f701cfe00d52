"""``screening explain``: rules met with value, threshold and margin; Kröger–Vink defects; score terms; rejections."""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest
from pymatgen.core.periodic_table import Species

from screening import cli, explain
from screening.errors import ScreeningError
from test_report import DATA, build_results

PAIR = "SrTiO3/Cr3+@Ti+La3+@Sr"


@pytest.fixture(scope="module")
def results(tmp_path_factory):
    base = tmp_path_factory.mktemp("explain-screen")
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, base / name)
    out = base / "results"
    build_results(base / "small_rules.yaml", out)
    return out


def _explain(capsys, *argv) -> tuple[int, str, str]:
    code = cli.main(["explain", *argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_pair_rules_met_against_shannon_radii(results, capsys):
    code, out, _ = _explain(capsys, PAIR, "--results", str(results), "--json")
    assert code == 0
    result = json.loads(out)
    assert result["status"] == "shortlisted" and result["candidate"] == PAIR
    radius = {c["what"]: c for c in result["checks"] if c["rule"] == "radius_mismatch"}
    # Shannon (1976) radii from pymatgen's own table: Cr3+ VI, Ti4+ VI; La3+ XII, Sr2+ XII
    cr, ti = Species("Cr", 3).get_shannon_radius("VI"), Species("Ti", 4).get_shannon_radius("VI")
    la, sr = Species("La", 3).get_shannon_radius("XII"), Species("Sr", 2).get_shannon_radius("XII")
    dopant = radius["dopant Cr3+ on Ti"]
    assert dopant["value"] == pytest.approx(abs(cr - ti) / ti, abs=1e-6)
    assert dopant["threshold"] == 0.15
    assert dopant["margin"] == pytest.approx(0.15 - abs(cr - ti) / ti, abs=1e-6)
    assert radius["codopant La3+ on Sr"]["value"] == pytest.approx(abs(la - sr) / sr, abs=1e-6)
    rules_named = {c["rule"] for c in result["checks"]}
    assert {"oxidation_state", "radius_mismatch", "radioactive", "abundance", "charge_balance", "cost",
            "alignment"} <= rules_named
    # water levels at pH 7 with the 0.1 V / 0.4 V margins: -0.0592 V per pH (Nernst, common practice)
    alignment = [c for c in result["checks"] if c["rule"] == "alignment"]
    assert alignment[0]["threshold"] == pytest.approx(-7 * 0.0592 - 0.1, abs=1e-9)
    assert alignment[1]["threshold"] == pytest.approx(1.229 - 7 * 0.0592 + 0.4, abs=1e-9)
    assert all(c["margin"] >= 0 for c in result["checks"] if isinstance(c["margin"], float))


def test_defects_are_neutral_kroger_vink(results, capsys):
    code, out, _ = _explain(capsys, PAIR, "--results", str(results), "--json")
    result = json.loads(out)
    assert result["defects"] == "Cr_Ti′ + La_Sr•"
    charges = {d["defect"]: d["effective_charge"] for d in result["defect_list"]}
    # Kröger–Vink: ′ one negative, • one positive effective charge (Kröger & Vink 1956; common practice)
    assert charges == {"Cr_Ti′": -1, "La_Sr•": 1}
    assert sum(d["count"] * d["effective_charge"] for d in result["defect_list"]) == 0


def test_vacancy_defect_set(results):
    ranked = pd.read_parquet(results / "stages" / "ranked.parquet")
    row = ranked[ranked["compensation"] == "oxygen_vacancy"].iloc[0]
    defects = explain.defect_lines(row["defects"])
    assert any(d["species"] == "vacancy" and d["effective_charge"] == 2 for d in defects)
    assert sum(d["count"] * d["effective_charge"] for d in defects) == 0


def test_score_is_the_weighted_sum_of_the_terms(results, capsys):
    code, out, _ = _explain(capsys, "1", "--results", str(results), "--json")
    result = json.loads(out)
    shortlist = pd.read_csv(results / "shortlist.csv")
    assert result["rank"] == 1 and result["candidate"] == shortlist["candidate_id"].iloc[0]
    from screening import rulesets

    weights = rulesets.load_ruleset(results.parent / "small_rules.yaml").sections["ranking"]["weights"]
    assert {p["term"]: p["weight"] for p in result["score_parts"]} == weights
    assert sum(p["contribution"] for p in result["score_parts"]) == pytest.approx(shortlist["score"].iloc[0], abs=1e-5)
    assert result["score_matches"] is True


def test_text_output_names_rules_and_defects(results, capsys):
    code, out, _ = _explain(capsys, PAIR, "--results", str(results))
    assert code == 0
    for text in ("Rules met:", "radius_mismatch", "Cr_Ti′", "Score = sum of weight × term", "charge_balance"):
        assert text in out


def test_ion_level_rejection_stands_for_its_pairs(results, capsys):
    # Rh: 0.001 ppm in the crust (CRC Handbook via mendeleev) < the 0.5 ppm floor of the small rule set
    code, out, _ = _explain(capsys, "SrTiO3/Rh3+@Ti+Nb5+@Ti", "--results", str(results), "--json")
    assert code == 0
    result = json.loads(out)
    assert result["status"] == "rejected" and result["removed_by"] == "abundance"
    row = result["rejections"][0]
    assert row["scope"] == "ion" and row["ion"] == "Rh3+ on Ti" and row["threshold"] == 0.5
    assert row["value"] < 0.01


def test_candidate_level_rejection(results, capsys):
    rejected = pd.read_parquet(results / "rejected.parquet")
    row = rejected[rejected["scope"] == "candidate"].iloc[0]
    code, out, _ = _explain(capsys, row["candidate_id"], "--results", str(results))
    assert code == 0
    assert f"removed by rule '{row['rule']}'" in out and row["detail"] in out


@pytest.mark.parametrize("candidate, message", [
    ("0", "rank 0 does not exist"), ("99999", "rank 99999 does not exist"),
    ("SrTiO3/Cr3+@Zr", "no candidate"), ("not an id", "neither a rank nor a candidate id"),
])
def test_bad_candidate_exits_2(results, capsys, candidate, message):
    code, out, err = _explain(capsys, candidate, "--results", str(results))
    assert code == 2 and out == ""
    assert err.startswith("screening: error:") and message in err and err.count("\n") == 1


def test_incomplete_folder_exits_2(results, tmp_path, capsys):
    partial = tmp_path / "partial"
    shutil.copytree(results, partial)
    (partial / "rejected.parquet").unlink()
    code, _, err = _explain(capsys, "1", "--results", str(partial))
    assert code == 2 and "incomplete" in err and "rejected.parquet" in err
    code, _, err = _explain(capsys, "1", "--results", str(tmp_path / "nowhere"))
    assert code == 2 and "not found" in err


def test_rule_set_from_provenance_or_rules_flag(results, tmp_path):
    bare = tmp_path / "bare"
    shutil.copytree(results, bare)
    (bare / "provenance.json").unlink()
    with pytest.raises(ScreeningError, match="pass --rules"):
        explain.explain("1", bare)
    rules_file = Path(json.loads((results / "provenance.json").read_text())["ruleset"]["path"])
    assert explain.explain("1", bare, rules_file)["rank"] == 1
    # the recorded text is used when the rule-set file has moved away
    moved = json.loads((results / "provenance.json").read_text())
    moved["ruleset"]["path"] = str(tmp_path / "gone.yaml")
    (bare / "provenance.json").write_text(json.dumps(moved))
    assert explain.explain("1", bare)["rule_set"] == "small"
