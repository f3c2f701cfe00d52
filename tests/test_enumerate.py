"""Enumeration: compensation ratios, Kröger–Vink labels and exact amounts of textbook codoping pairs."""
from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest

from screening import enumerate as enum
from screening import hosts as hostlib
from screening.formulas import parse_formula

ENUMERATION = {"singles": True, "pairs": True, "vacancy_compensation": True, "electron_compensation": False}
LIBRARY = hostlib.load_hosts(hostlib.Path(__file__).resolve().parents[1] / "candidates" / "hosts.yaml")
HOSTS = {h.id: h for h in LIBRARY}


def candidates_for(host_id: str, ions: list[tuple[str, int]], fraction=Fraction(1, 50), **options):
    host = HOSTS[host_id]
    pool = pd.DataFrame({"element": [e for e, _ in ions], "charge": [c for _, c in ions], "common": True})
    placed = enum.placements(hostlib.sites_frame([host]), pool)
    return enum.combine(placed, {**ENUMERATION, **options}, fraction)


def one(frame: pd.DataFrame, candidate_id: str) -> pd.Series:
    chosen = frame[frame["candidate_id"] == candidate_id]
    assert len(chosen) == 1, f"{candidate_id} not enumerated exactly once: {list(frame['candidate_id'])}"
    return chosen.iloc[0]


def test_cr_sb_in_rutile_is_one_to_one():
    # Cr3+/Sb5+ codoped TiO2: one Cr_Ti′ per Sb_Ti• (Kudo and co-workers' classic pair; common practice).
    c = one(candidates_for("TiO2-rutile", [("Cr", 3), ("Sb", 5)]), "TiO2-rutile/Cr3+@Ti+Sb5+@Ti")
    assert c["ratio"] == "1:1"
    assert c["defects"] == "Cr_Ti′ + Sb_Ti•"


def test_la_cr_in_strontium_titanate_pairs_a_and_b_sites():
    # La3+ on Sr2+ (donor, •) compensates Cr3+ on Ti4+ (acceptor, ′) one to one (common practice).
    frame = candidates_for("SrTiO3", [("La", 3), ("Cr", 3)])
    c = one(frame, "SrTiO3/Cr3+@Ti+La3+@Sr")
    assert (c["ratio"], c["defects"]) == ("1:1", "Cr_Ti′ + La_Sr•")
    host = HOSTS["SrTiO3"]
    assert enum.candidate_formula(c, host) == "Sr0.98La0.02Ti0.98Cr0.02O3"


def test_divalent_acceptor_needs_two_pentavalent_donors():
    # A 2+ ion on a 4+ site carries two negative units; a 5+ ion one positive: 1:2
    # (n1*Δ1 + n2*Δ2 = 0 with the smallest positive integers; Kröger–Vink bookkeeping).
    c = one(candidates_for("TiO2-rutile", [("Zn", 2), ("Nb", 5)]), "TiO2-rutile/Zn2+@Ti+Nb5+@Ti")
    assert (c["ratio"], c["defects"]) == ("1:2", "Zn_Ti′′ + 2 Nb_Ti•")
    assert enum.candidate_formula(c, HOSTS["TiO2-rutile"]) == "Ti0.94Zn0.02Nb0.04O2"


def test_trivalent_acceptor_with_hexavalent_donor_is_two_to_one():
    # Cr3+ (Δ = -1) with W6+ (Δ = +2) on Ti4+: 2 Cr_Ti′ + W_Ti•• (common practice).
    c = one(candidates_for("TiO2-rutile", [("Cr", 3), ("W", 6)]), "TiO2-rutile/Cr3+@Ti+W6+@Ti")
    assert (c["ratio"], c["defects"]) == ("2:1", "2 Cr_Ti′ + W_Ti••")


def test_acceptor_with_oxygen_vacancies():
    # One V_O•• per two negative units: 2 Cr_Ti′ + V_O••; at 2 % Cr the formula loses 0.01 O.
    frame = candidates_for("SrTiO3", [("Cr", 3)])
    c = one(frame, "SrTiO3/Cr3+@Ti+V_O")
    assert c["compensation"] == "oxygen_vacancy"
    assert c["defects"] == "2 Cr_Ti′ + V_O••"
    assert enum.candidate_formula(c, HOSTS["SrTiO3"]) == "SrTi0.98Cr0.02O2.99"
    frame = candidates_for("SrTiO3", [("Mg", 2)])
    c = one(frame, "SrTiO3/Mg2+@Ti+V_O")
    assert c["defects"] == "Mg_Ti′′ + V_O••"


def test_uncompensated_donor_is_marked_for_the_charge_rule():
    frame = candidates_for("TiO2-rutile", [("Nb", 5)])
    c = one(frame, "TiO2-rutile/Nb5+@Ti")
    assert c["compensation"] == "none"
    with_electrons = one(candidates_for("TiO2-rutile", [("Nb", 5)], electron_compensation=True),
                         "TiO2-rutile/Nb5+@Ti")
    assert with_electrons["compensation"] == "electrons"
    assert with_electrons["defects"] == "Nb_Ti• + 1 e′"


def test_every_compensated_candidate_is_exactly_neutral():
    frame = candidates_for("SrTiO3", [("La", 3), ("Cr", 3), ("Sb", 5), ("Rh", 3), ("Na", 1), ("Mg", 2),
                                       ("W", 6), ("Nb", 5), ("Zr", 4)])
    balanced = frame[frame["compensation"] != "none"]
    assert len(balanced) > 20
    assert np.all(enum.net_charge(balanced) == 0)
    unbalanced = frame[frame["compensation"] == "none"]
    assert np.all(enum.net_charge(unbalanced) != 0)


def test_composition_charge_sums_to_zero_exactly():
    # Independent of the enumeration's own bookkeeping: sum oxidation states over the exact
    # composition, and check that the written formula reads back to it (to its 4 decimals).
    frame = candidates_for("SrTiO3", [("La", 3), ("Cr", 3), ("Mg", 2), ("Nb", 5)])
    charges = {"Sr": 2, "Ti": 4, "O": -2}
    for _, c in frame[frame["compensation"] != "none"].iterrows():
        amounts = enum.candidate_composition(c, HOSTS["SrTiO3"])
        written = parse_formula(enum.candidate_formula(c, HOSTS["SrTiO3"]))
        assert all(abs(float(written[e] - amounts[e])) < 1e-4 for e in amounts)
        ion_charge = {**charges, c["dopant_element"]: int(c["dopant_charge"])}
        if c["kind"] == "pair":
            ion_charge[c["codopant_element"]] = int(c["codopant_charge"])
        assert sum(amounts[e] * ion_charge[e] for e in amounts) == 0, c["candidate_id"]


def test_amount_matrix_matches_formula():
    frame = candidates_for("SrTiO3", [("La", 3), ("Cr", 3)])
    amounts = enum.candidate_amounts(frame, {"SrTiO3": HOSTS["SrTiO3"]})
    for i, c in frame.iterrows():
        parsed = parse_formula(enum.candidate_formula(c, HOSTS["SrTiO3"]))
        for element, value in parsed.items():
            assert amounts.loc[i, element] == pytest.approx(float(value))


def test_host_ion_on_its_own_site_is_not_a_dopant():
    frame = candidates_for("TiO2-rutile", [("Ti", 4), ("Ti", 3)])
    assert list(frame["candidate_id"]) == ["TiO2-rutile/Ti3+@Ti+V_O"]


def test_fast_formulas_equal_the_exact_ones():
    # candidate_formulas (integers over a common denominator) must write what the Fraction path writes.
    frame = candidates_for("SrTiO3", [("La", 3), ("Cr", 3), ("Mg", 2), ("Nb", 5), ("Na", 1), ("W", 6)])
    frame = pd.concat([frame, candidates_for("Ga2O3-beta", [("Cr", 3), ("Zn", 2), ("Sn", 4), ("Nb", 5)])])
    hosts = {h: HOSTS[h] for h in ("SrTiO3", "Ga2O3-beta")}
    expected = [enum.candidate_formula(row, hosts[row["host"]]) for _, row in frame.iterrows()]
    assert enum.candidate_formulas(frame, hosts) == expected
    assert len(expected) > 50
