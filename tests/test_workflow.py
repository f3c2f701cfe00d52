"""One end-to-end run of the Snakemake workflow on the small rule set (tests/data/small_*.yaml)."""
from __future__ import annotations

import shutil
from pathlib import Path

import pandas as pd
import pytest

from screening import cli

DATA = Path(__file__).resolve().parent / "data"
REPO = DATA.parents[1]
SHORTLIST_REQUIRED = ["host", "dopant", "dopant_site", "codopant", "codopant_site", "ratio", "compensation",
                      "formula", "cbm_v_nhe", "vbm_v_nhe", "onset_ev", "sth_limit", "score", "rank"]


@pytest.fixture(scope="module")
def small_results(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("small")
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, root / name)
    # one host from a CIF file as well (issue 4): the screen takes a folder of structures
    (root / "cif").mkdir()
    for suffix in (".cif", ".yaml"):
        shutil.copy(REPO / "candidates" / "structures" / f"ZnO_wurtzite{suffix}", root / "cif")
    with open(root / "small_rules.yaml", "a") as rules:
        rules.write("structures: cif\n")
    out = root / "results"
    assert cli.main(["run", "--rules", str(root / "small_rules.yaml"), "--out", str(out), "--cores", "2"]) == 0
    return out


pytestmark = pytest.mark.workflow


def test_outputs_exist_with_the_documented_columns(small_results):
    shortlist = pd.read_csv(small_results / "shortlist.csv", keep_default_na=False)
    assert set(SHORTLIST_REQUIRED) <= set(shortlist.columns)
    assert len(shortlist) > 0
    assert list(shortlist["rank"]) == list(range(1, len(shortlist) + 1))
    assert shortlist["score"].is_monotonic_decreasing
    rejected = pd.read_parquet(small_results / "rejected.parquet")
    assert {"host", "dopant", "dopant_site", "codopant", "codopant_site", "rule", "value",
            "threshold"} <= set(rejected.columns)
    funnel = pd.read_csv(small_results / "funnel.csv")
    assert {"host", "rule", "candidates_in", "candidates_out"} <= set(funnel.columns)


def test_textbook_pair_survives_with_exact_formula(small_results):
    # La3+/Cr3+ codoped SrTiO3 is a well-studied visible-light photocatalyst (common practice).
    shortlist = pd.read_csv(small_results / "shortlist.csv", keep_default_na=False)
    row = shortlist[(shortlist["host"] == "SrTiO3") & (shortlist["dopant"] == "Cr3+")
                    & (shortlist["codopant"] == "La3+")].iloc[0]
    assert (row["dopant_site"], row["codopant_site"], row["ratio"]) == ("Ti", "Sr", "1:1")
    assert row["formula"] == "Sr0.98La0.02Ti0.98Cr0.02O3"
    assert row["defects"] == "Cr_Ti′ + La_Sr•"
    # Butler–Ginley with the host gap 3.25 eV at pH 7: chi(SrTiO3) = 5.317 eV (our ion table);
    # E_CB = chi - 4.5 - Eg/2 - 0.0592*7; the doped composition moves chi by a few meV only.
    assert row["cbm_v_nhe"] == pytest.approx(5.317 - 4.5 - 3.25 / 2 - 0.0592 * 7, abs=0.01)
    assert row["vbm_v_nhe"] - row["cbm_v_nhe"] == pytest.approx(3.25, abs=1e-4)
    # The STH limit is that of the absorption onset (AM1.5G; our solar module, checked against pvlib),
    # and a dopant level can only lower the onset below the host gap.
    from screening import solar

    assert row["onset_ev"] <= 3.25 + 1e-9
    assert row["sth_limit"] == pytest.approx(float(solar.sth_limit(row["onset_ev"])), rel=1e-4)


def test_rules_remove_what_they_should_with_reasons(small_results):
    rejected = pd.read_parquet(small_results / "rejected.parquet")
    # Th is radioactive (mendeleev); Rh has about 0.001 ppm in the crust (CRC Handbook via mendeleev).
    assert (rejected.loc[rejected["rule"] == "radioactive", "dopant"].str.startswith("Th")).all()
    assert set(rejected.loc[rejected["rule"] == "radioactive", "dopant"]) >= {"Th4+"}
    assert "Rh3+" in set(rejected.loc[rejected["rule"] == "abundance", "dopant"])
    radius = rejected[rejected["rule"] == "radius_mismatch"].dropna(subset=["value"])
    assert (radius["value"] > radius["threshold"]).all()
    shortlist = pd.read_csv(small_results / "shortlist.csv", keep_default_na=False)
    assert not shortlist["dopant"].str.startswith(("Th", "Rh")).any()
    assert not shortlist["codopant"].str.startswith(("Th", "Rh")).any()


def test_funnel_is_consistent_with_the_shortlist(small_results):
    funnel = pd.read_csv(small_results / "funnel.csv")
    shortlist = pd.read_csv(small_results / "shortlist.csv", keep_default_na=False)
    for host, rows in funnel.groupby("host", sort=False):
        ins, outs = rows["candidates_in"].to_numpy(), rows["candidates_out"].to_numpy()
        assert (ins[1:] == outs[:-1]).all(), host          # each rule starts where the last ended
        assert outs[-1] == (shortlist["host"] == host).sum(), host
        assert ins[0] == rows["enumerated"].iloc[0]


def test_kept_candidates_meet_the_thresholds(small_results):
    shortlist = pd.read_csv(small_results / "shortlist.csv", keep_default_na=False)
    assert (shortlist["dopant_mismatch"] <= 0.15).all()
    codopant = pd.to_numeric(shortlist["codopant_mismatch"], errors="coerce").dropna()
    assert (codopant <= 0.15).all()
    assert (shortlist["cost_usd_per_kg"] <= 500).all()
    assert (shortlist["her_margin_v"] >= 0).all() and (shortlist["oer_margin_v"] >= 0).all()
    pairs = shortlist[shortlist["compensation"] == "codopant"]
    assert pairs["ratio"].isin(["1:1", "1:2", "2:1"]).all()


def test_a_cif_host_goes_through_the_whole_workflow(small_results):
    # ZnO (wurtzite) from its CIF: Zn2+ 4-fold by CrystalNN, as in the hand-written library entry.
    funnel = pd.read_csv(small_results / "funnel.csv")
    rows = funnel[funnel["host"] == "ZnO_wurtzite"]
    assert len(rows) > 0 and rows["enumerated"].iloc[0] > 0
    rejected = pd.read_parquet(small_results / "rejected.parquet")
    assert (rejected["host"] == "ZnO_wurtzite").any()
