"""Anion-site dopants: N3-, F-, S2- on O2- sites, their compensation, labels, radii and band edges.

Sources: Kröger & Vink, Solid State Phys. 3 (1956) 307 (labels, neutrality); Shannon,
Acta Cryst. A32 (1976) 751 (F- II 1.285, III 1.30, IV 1.31, VI 1.33 Å; N3- IV 1.46 Å;
S2- VI 1.84 Å; O2- III 1.36, IV 1.38, VI 1.40 Å); Butler & Ginley, J. Electrochem.
Soc. 125 (1978) 228 (geometric-mean electronegativity); the N/Nb and Cr/F
codoping schemes of TiO2 photocatalysts (common practice).
"""
from __future__ import annotations

from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screening import bands, ions, pipeline, rulesets
from screening import enumerate as enum
from screening import hosts as hostlib
from screening.errors import ScreeningError

REPO = Path(__file__).resolve().parents[1]
HOSTS = {h.id: h for h in hostlib.load_hosts(REPO / "candidates" / "hosts.yaml")}
ENUMERATION = {"singles": True, "pairs": True, "vacancy_compensation": True, "electron_compensation": False}


def candidates(host_id, cations, anions, fraction=Fraction(1, 50)):
    host = HOSTS[host_id]
    pool = pd.DataFrame({"element": [e for e, _ in cations], "charge": [c for _, c in cations], "common": True})
    placed = pd.concat([enum.placements(hostlib.sites_frame([host]), pool), enum.anion_placements([host], anions)],
                       ignore_index=True).sort_values(enum.PLACEMENT_KEY).reset_index(drop=True)
    return enum.combine(placed, ENUMERATION, fraction)


def one(frame, candidate_id):
    chosen = frame[frame["candidate_id"] == candidate_id]
    assert len(chosen) == 1, f"{candidate_id} not enumerated once: {list(frame['candidate_id'])}"
    return chosen.iloc[0]


def test_nitrogen_with_a_pentavalent_donor_is_one_to_one():
    # N3- on O2- is an acceptor (N_O′); Nb5+ on Ti4+ a donor (Nb_Ti•): 1:1 (Kröger–Vink; common practice)
    frame = candidates("TiO2-anatase", [("Nb", 5)], ["N"])
    c = one(frame, "TiO2-anatase/N3-@O+Nb5+@Ti")
    assert (c["ratio"], c["defects"], c["compensation"]) == ("1:1", "N_O′ + Nb_Ti•", "codopant")
    # 2 % of the O site is N: 0.04 N per TiO2, compensated by 0.04 Nb
    assert enum.candidate_formula(c, HOSTS["TiO2-anatase"]) == "Ti0.96Nb0.04O1.96N0.04"
    assert enum.net_charge(frame[frame["compensation"] != "none"]).tolist() == [0] * int(
        (frame["compensation"] != "none").sum())


def test_fluorine_donor_compensates_a_trivalent_acceptor_and_labels():
    frame = candidates("TiO2-rutile", [("Cr", 3)], ["N", "F", "S"])
    c = one(frame, "TiO2-rutile/Cr3+@Ti+F-@O")
    assert (c["ratio"], c["defects"]) == ("1:1", "Cr_Ti′ + F_O•")
    assert one(frame, "TiO2-rutile/S2-@O")["defects"] == "S_O×"
    assert one(frame, "TiO2-rutile/S2-@O")["compensation"] == "isovalent"
    # an acceptor on the anion site with oxygen vacancies: 2 N_O′ + V_O••
    assert one(frame, "TiO2-rutile/N3-@O+V_O")["defects"] == "2 N_O′ + V_O••"
    assert enum.candidate_formula(one(frame, "TiO2-rutile/N3-@O+V_O"), HOSTS["TiO2-rutile"]) == "TiO1.94N0.04"
    # a lone donor on the anion site is left for the charge-balance rule
    assert one(frame, "TiO2-rutile/F-@O")["compensation"] == "none"


def test_radii_at_the_anion_sites_coordination():
    hosts = [HOSTS["TiO2-rutile"], HOSTS["SrTiO3"], HOSTS["ZnO"]]
    placed = enum.anion_placements(hosts, ["F", "N", "S"]).set_index(["host", "element"])
    # F- is tabulated at III and VI (Shannon 1976): taken as is at rutile's O (III) and SrTiO3's O (VI)
    assert placed.loc[("TiO2-rutile", "F"), "radius_a"] == pytest.approx(1.30)
    assert placed.loc[("SrTiO3", "F"), "radius_a"] == pytest.approx(1.33)
    assert not placed.loc[("SrTiO3", "F"), "radius_estimated"]
    # N3- only at IV: exact in wurtzite ZnO (O IV), scaled by O2-'s trend elsewhere and marked
    assert placed.loc[("ZnO", "N"), "radius_a"] == pytest.approx(1.46)
    assert not placed.loc[("ZnO", "N"), "radius_estimated"]
    assert placed.loc[("TiO2-rutile", "N"), "radius_a"] == pytest.approx(1.46 * 1.36 / 1.38)
    assert placed.loc[("TiO2-rutile", "N"), "radius_estimated"]
    # S2- only at VI: exact on SrTiO3's six-fold O, and 31 % larger than O2- (1.84 vs 1.40 Å)
    assert placed.loc[("SrTiO3", "S"), "radius_a"] == pytest.approx(1.84)
    assert placed.loc[("SrTiO3", "S"), "mismatch"] == pytest.approx(0.44 / 1.40)
    assert (placed["site"] == "O").all() and (placed["site_charge"] == -2).all()


def test_band_edges_see_the_substituted_anion():
    frame = candidates("TiO2-anatase", [("Nb", 5)], ["N"])
    c = frame[frame["candidate_id"] == "TiO2-anatase/N3-@O+Nb5+@Ti"]
    amounts = enum.candidate_amounts(c, {"TiO2-anatase": HOSTS["TiO2-anatase"]})
    assert amounts.iloc[0][["Ti", "Nb", "O", "N"]].tolist() == pytest.approx([0.96, 0.04, 1.96, 0.04])
    chi = bands.electronegativity_of_amounts(amounts)[0]
    table = ions.load_ion_data().elements["chi_mulliken_ev"]
    # Butler–Ginley: geometric mean over all atoms, N's electronegativity included
    expected = np.exp((0.96 * np.log(table["Ti"]) + 0.04 * np.log(table["Nb"]) + 1.96 * np.log(table["O"])
                       + 0.04 * np.log(table["N"])) / 3.0)
    assert chi == pytest.approx(expected)
    # S is less electronegative than O (mendeleev's (I1 + A)/2: 6.22 vs 7.54 eV): isovalent S_O
    # alone lowers the compound's chi and so raises both edges (E_CB = chi - 4.5 - Eg/2)
    frame = candidates("TiO2-anatase", [], ["S"])
    s_o = frame[frame["candidate_id"] == "TiO2-anatase/S2-@O"]
    chi_s = bands.electronegativity_of_amounts(enum.candidate_amounts(s_o, {"TiO2-anatase": HOSTS["TiO2-anatase"]}))
    chi_host = bands.electronegativity_of_amounts(pd.DataFrame({"Ti": [1.0], "O": [2.0]}))
    assert table["S"] < table["O"]
    assert chi_s[0] < chi_host[0] - 1e-3
    cbm_s, _ = bands.band_edges(chi_s[0], 3.2)
    cbm_host, _ = bands.band_edges(chi_host[0], 3.2)
    assert cbm_s < cbm_host


def test_rule_set_key_and_the_screen_stage(tmp_path):
    document = {"name": "t", "hosts": "h", "dopant_pool": "p", "enumeration": {"anion_dopants": ["N", "F"]}}
    filled = rulesets.validate_document(document, "test")
    assert filled["enumeration"]["anion_dopants"] == ["N", "F"]
    assert rulesets.validate_document({"name": "t", "hosts": "h", "dopant_pool": "p"}, "t")[
        "enumeration"]["anion_dopants"] == []
    with pytest.raises(ScreeningError, match="anion_dopants"):
        rulesets.validate_document({**document, "enumeration": {"anion_dopants": ["P"]}}, "test")

    pool = tmp_path / "pool.yaml"
    pool.write_text("name: p\nelements: [Nb, Cr]\n")
    hosts_json = tmp_path / "hosts.json"
    pipeline.prepare_hosts(REPO / "tests" / "data" / "small_hosts.yaml", 8, hosts_json)
    out = [tmp_path / n for n in ("kept.parquet", "rejected.parquet", "funnel.csv")]
    kept = pipeline.screen_shard(hosts_json, 0, pool, filled["enumeration"], filled["filters"], filled["scarcity"],
                                 *out)
    ids = set(kept["candidate_id"])
    assert {"TiO2-rutile/N3-@O+Nb5+@Ti", "TiO2-rutile/Cr3+@Ti+F-@O", "SrTiO3/N3-@O+Nb5+@Ti"} <= ids
    funnel = pd.read_csv(out[2])
    # the implied counts of the single-ion rules include the anion placements' pairs
    first = funnel[funnel["rule"] == "oxidation_state"].set_index("host")
    without = pipeline.screen_shard(hosts_json, 0, pool, {**filled["enumeration"], "anion_dopants": []},
                                    filled["filters"], filled["scarcity"], *out)
    assert len(without) < len(kept)
    assert (first["enumerated"] > pd.read_csv(out[2]).groupby("host")["enumerated"].max()).all()


def test_unsupported_anion_is_refused():
    with pytest.raises(ScreeningError, match="not supported"):
        enum.anion_placements([HOSTS["ZnO"]], ["P"])
