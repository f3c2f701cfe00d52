"""`screening diff`: entered, left and moved candidates with the rule that made the difference."""
from __future__ import annotations

import hashlib
import json
from pathlib import Path

import pandas as pd
import pytest
import yaml
from pymatgen.core import Species

from screening import cli, diff
from screening.filters import REJECTED_COLUMNS

SHORT_COLUMNS = ["rank", "candidate_id", "host", "dopant", "dopant_site", "codopant", "codopant_site", "score",
                 "her_margin_v"]


def _record(criteria: dict, library_sha: str = "a" * 64) -> dict:
    return {"format": 1,
            "ruleset": {"name": "t", "path": "/x/t.yaml", "sha256": hashlib.sha256(repr(criteria).encode()).hexdigest(),
                        "text": "...", "criteria": criteria},
            "host_library": {"path": "/x/hosts.yaml", "sha256": library_sha},
            "packages": {"pandas": pd.__version__}, "command": "screening run", "written_utc": "now"}


def _folder(path: Path, rows: list[tuple], rejected: list[dict], record: dict | None) -> Path:
    path.mkdir(parents=True)
    pd.DataFrame(rows, columns=SHORT_COLUMNS).to_csv(path / "shortlist.csv", index=False)
    columns = REJECTED_COLUMNS + ["candidate_id"]
    frame = pd.DataFrame([{**{c: "" for c in columns}, **r} for r in rejected], columns=columns)
    frame = frame.astype({"value": float, "threshold": float})
    frame.to_parquet(path / "rejected.parquet", index=False)
    if record is not None:
        (path / "provenance.json").write_text(json.dumps(record))
    return path


@pytest.fixture
def pair(tmp_path):
    a = _folder(tmp_path / "A", [
        (1, "SrTiO3/Cr3+@Ti+La3+@Sr", "SrTiO3", "Cr3+", "Ti", "La3+", "Sr", 0.5, 0.9),
        (2, "SrTiO3/Rh3+@Ti+V_O", "SrTiO3", "Rh3+", "Ti", "", "", 0.4, 0.8),
        (3, "SrTiO3/Fe3+@Ti+Nb5+@Ti", "SrTiO3", "Fe3+", "Ti", "Nb5+", "Ti", 0.3, 0.7),
    ], [
        # A removed Sb5+ on the Ti site of SrTiO3 before pairs were built (scope ion) ...
        {"host": "SrTiO3", "dopant": "Sb5+", "dopant_site": "Ti", "rule": "radius_mismatch", "value": 0.157,
         "threshold": 0.15, "scope": "ion", "detail": "radius mismatch 0.157 > 0.15 (Sb5+ 0.6 Å vs Ti 0.605 Å)"},
        # ... and a whole candidate by cost
        {"host": "TiO2-rutile", "dopant": "Zn2+", "dopant_site": "Ti", "rule": "cost", "value": 612.0,
         "threshold": 500.0, "scope": "candidate", "detail": "cost 612 USD/kg > 500 USD/kg",
         "candidate_id": "TiO2-rutile/Zn2+@Ti+V_O"},
    ], _record({"scarcity.min_crust_ppm": None, "ranking.top": None}))
    b = _folder(tmp_path / "B", [
        (1, "SrTiO3/Cr3+@Ti+La3+@Sr", "SrTiO3", "Cr3+", "Ti", "La3+", "Sr", 0.5, 0.9),
        (2, "SrTiO3/Fe3+@Ti+Nb5+@Ti", "SrTiO3", "Fe3+", "Ti", "Nb5+", "Ti", 0.3, 0.7),
        (3, "SrTiO3/Al3+@Ti+Sb5+@Ti", "SrTiO3", "Al3+", "Ti", "Sb5+", "Ti", 0.2, 0.6),
        (4, "TiO2-rutile/Zn2+@Ti+V_O", "TiO2-rutile", "Zn2+", "Ti", "", "", 0.1, 0.5),
        (5, "SrTiO3/W6+@Ti", "SrTiO3", "W6+", "Ti", "", "", 0.05, 0.4),
    ], [
        {"host": "SrTiO3", "dopant": "Rh3+", "dopant_site": "Ti", "rule": "abundance", "value": 0.001,
         "threshold": 0.5, "scope": "ion", "detail": "Rh crustal abundance 0.001 ppm < 0.5 ppm"},
    ], _record({"scarcity.min_crust_ppm": 0.5, "ranking.top": None}))
    return a, b


def test_entered_left_moved_with_reasons(pair):
    result = diff.compare(*pair)
    assert result["counts"] == {"a": 3, "b": 5, "entered": 3, "left": 1, "moved": 1, "unchanged": 1}
    left = result["left"][0]
    assert left["candidate_id"] == "SrTiO3/Rh3+@Ti+V_O" and left["rank_a"] == 2
    assert left["reasons_in_b"] == [{"rule": "abundance", "value": 0.001, "threshold": 0.5, "scope": "ion",
                                     "detail": "Rh crustal abundance 0.001 ppm < 0.5 ppm", "ion": "Rh3+",
                                     "site": "Ti"}]
    entered = {r["candidate_id"]: r["reasons_in_a"] for r in result["entered"]}
    assert list(entered) == ["SrTiO3/Al3+@Ti+Sb5+@Ti", "TiO2-rutile/Zn2+@Ti+V_O", "SrTiO3/W6+@Ti"]
    # the codopant's ion-scope rejection explains the pair
    assert [(r["rule"], r["ion"], r["value"], r["threshold"]) for r in entered["SrTiO3/Al3+@Ti+Sb5+@Ti"]] == [
        ("radius_mismatch", "Sb5+", 0.157, 0.15)]
    assert entered["TiO2-rutile/Zn2+@Ti+V_O"][0]["rule"] == "cost"
    assert entered["SrTiO3/W6+@Ti"][0]["rule"] == "not_enumerated"
    moved = result["moved"][0]
    assert (moved["candidate_id"], moved["rank_a"], moved["rank_b"]) == ("SrTiO3/Fe3+@Ti+Nb5+@Ti", 3, 2)
    assert moved["changed"] == {} and moved["left_above"] == 1 and moved["entered_above"] == 0


def test_provenance_differences_come_first(pair, capsys):
    assert cli.main(["diff", str(pair[0]), str(pair[1])]) == 0
    text = capsys.readouterr().out
    assert text.index("Provenance differences") < text.index("Entered") < text.index("Left") < text.index("Moved")
    assert "ruleset.criteria.scarcity.min_crust_ppm: – -> 0.5" in text
    assert "SrTiO3/Rh3+@Ti+V_O  -> abundance: Rh crustal abundance 0.001 ppm < 0.5 ppm" in text
    assert "written_utc" not in text  # differs on every run by nature
    assert cli.main(["diff", str(pair[0]), str(pair[1]), "--json"]) == 0
    document = json.loads(capsys.readouterr().out)
    assert list(document)[:3] == ["a", "b", "provenance"]
    assert {d["key"] for d in document["provenance"]} == {"ruleset.criteria.scarcity.min_crust_ppm",
                                                          "ruleset.sha256"}


def test_ranking_top_cut_is_named(tmp_path):
    rows = [(1, "SrTiO3/Cr3+@Ti+La3+@Sr", "SrTiO3", "Cr3+", "Ti", "La3+", "Sr", 0.5, 0.9)]
    a = _folder(tmp_path / "A", rows, [], _record({"ranking.top": 1}))
    b = _folder(tmp_path / "B", rows + [(2, "SrTiO3/W6+@Ti", "SrTiO3", "W6+", "Ti", "", "", 0.05, 0.4)], [],
                _record({"ranking.top": None}))
    reason = diff.compare(a, b)["entered"][0]["reasons_in_a"][0]
    assert reason["rule"] == "ranking.top" and reason["threshold"] == 1


def _snapshot(*folders):
    return {p: p.read_bytes() for f in folders for p in sorted(Path(f).rglob("*")) if p.is_file()}


def test_different_host_libraries_refused(pair, capsys):
    a, b = pair
    record = json.loads((b / "provenance.json").read_text())
    record["host_library"] = {"path": "/y/other_hosts.yaml", "sha256": "b" * 64}
    (b / "provenance.json").write_text(json.dumps(record))
    before = _snapshot(a, b)
    assert cli.main(["diff", str(a), str(b)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("screening: error: the two folders were screened on different host libraries")
    assert "/x/hosts.yaml" in err and "/y/other_hosts.yaml" in err
    assert _snapshot(a, b) == before


def test_not_a_results_folder(tmp_path, capsys):
    (tmp_path / "empty").mkdir()
    assert cli.main(["diff", str(tmp_path / "empty"), str(tmp_path / "none")]) == 2
    assert "shortlist.csv" in capsys.readouterr().err


def _shannon(label: str, site: str, cn: int) -> float:
    """Shannon (1976) ionic radius from pymatgen's copy of the table; spin as in README, Methods."""
    species = Species.from_str(label)
    roman = {6: "VI", 8: "VIII", 12: "XII", 4: "IV"}[cn]
    try:
        return species.get_shannon_radius(roman)
    except KeyError:
        spin = "High Spin" if species.element.row == 4 else "Low Spin"
        return species.get_shannon_radius(roman, spin=spin)


@pytest.mark.workflow
def test_tighter_size_rule_end_to_end(small_screen, tmp_path):
    tighter = small_screen.with_name("tighter.yaml")
    tighter.write_text(small_screen.read_text().replace("max_relative: 0.15", "max_relative: 0.12"))
    a, b = tmp_path / "A", tmp_path / "B"
    for rules, out in ((small_screen, a), (tighter, b)):  # threads and up to provenance.json only: speed
        assert cli.main(["run", "--rules", str(rules), "--out", str(out), "--cores", "2",
                         f"--snakemake-args=--force-use-threads {out / 'provenance.json'}"]) == 0
    result = diff.compare(a, b)
    assert [(d["key"], d["a"], d["b"]) for d in result["provenance"]][0] == (
        "ruleset.criteria.filters.radius_mismatch.max_relative", 0.15, 0.12)
    assert result["entered"] == [] and result["left"], "a tighter size rule can only remove candidates"
    hosts = {h["id"]: h for h in yaml.safe_load((small_screen.parent / "small_hosts.yaml").read_text())["hosts"]}
    for row in result["left"]:
        reasons = row["reasons_in_b"]
        assert {r["rule"] for r in reasons} == {"radius_mismatch"}, row
        for r in reasons:
            assert r["threshold"] == 0.12 and 0.12 < r["value"] <= 0.15
            host = hosts[row["candidate_id"].split("/")[0]]
            site = next(s for s in host["sites"] if s["label"] == r["site"])
            r_site = _shannon(f"{site['element']}{site['oxidation_state']}+", site["label"], site["coordination"])
            r_ion = _shannon(r["ion"], r["site"], site["coordination"])
            # the mismatch the rule reported, recomputed from pymatgen's Shannon table
            assert abs(abs(r_ion - r_site) / r_site - r["value"]) < 1e-3, (row["candidate_id"], r)
    # the other way round, the same candidates enter, explained by the same rule in B
    back = diff.compare(b, a)
    assert [r["candidate_id"] for r in back["entered"]] == [r["candidate_id"] for r in result["left"]]
    assert all(x["reasons_in_a"] == y["reasons_in_b"] for x, y in zip(back["entered"], result["left"]))
