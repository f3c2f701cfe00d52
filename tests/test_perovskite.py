"""Goldschmidt t and Bartel tau of library perovskites and of doped compositions.

Sources: Goldschmidt, Naturwissenschaften 14 (1926) 477; Bartel et al., Sci. Adv. 5
(2019) eaav0693 (tau < 4.18 predicts a perovskite); Shannon radii (1976) with A at
XII, B at VI and O at VI (common practice).
"""
from __future__ import annotations

from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screening import enumerate as enum
from screening import hosts as hostlib
from screening import perovskite
from screening.filters import tolerance

REPO = Path(__file__).resolve().parents[1]
HOSTS = {h.id: h for h in hostlib.load_hosts(REPO / "candidates" / "hosts.yaml")}
LATTICE = {"tolerance": {"min": 0.8, "max": 1.1}, "tau_max": 4.18, "apply_to_families": ["perovskite"]}
ENUMERATION = {"singles": True, "pairs": True, "vacancy_compensation": True, "electron_compensation": False}


def host_factors(host_id: str) -> tuple[float, float]:
    row = perovskite.host_table({host_id: HOSTS[host_id]}, ["perovskite"]).iloc[0]
    return (float(perovskite.goldschmidt(row.r_a, row.r_b, row.r_x)),
            float(perovskite.bartel_tau(row.r_a, row.r_b, row.r_x, row.n_a)))


@pytest.mark.parametrize("host_id, expected", [
    # from Shannon radii: SrTiO3 about 1.00, BaTiO3 about 1.06, CaTiO3 about 0.97 (common practice)
    ("SrTiO3", 1.00), ("BaTiO3", 1.06), ("CaTiO3", 0.97)])
def test_goldschmidt_of_titanates(host_id, expected):
    t, _ = host_factors(host_id)
    assert t == pytest.approx(expected, abs=0.006)


def test_goldschmidt_by_hand_from_shannon_values():
    # Sr2+ XII 1.44, Ti4+ VI 0.605, O2- VI 1.40 Å (Shannon 1976): (1.44 + 1.40) / (sqrt 2 x 2.005)
    assert float(perovskite.goldschmidt(1.44, 0.605, 1.40)) == pytest.approx(2.84 / (2 ** 0.5 * 2.005))


@pytest.mark.parametrize("host_id", ["SrTiO3", "BaTiO3", "CaTiO3", "KTaO3", "NaTaO3", "BaSnO3"])
def test_tau_of_known_perovskites_is_below_4_18(host_id):
    # all six are perovskites at room temperature (common practice); Bartel et al. 2019: tau < 4.18
    _, tau = host_factors(host_id)
    assert 0 < tau < perovskite.BARTEL_TAU_MAX


def test_tau_of_lithium_tantalate_says_not_perovskite():
    # LiTaO3 takes the LiNbO3 structure, not perovskite (common practice). The library's radii:
    # Li+ VI 0.76, Ta5+ VI 0.64, O2- IV 1.38 Å (Shannon 1976):
    # tau = 1.38/0.64 - (1 - (0.76/0.64)/ln(0.76/0.64)) = 8.07
    h = HOSTS["LiTaO3"]
    li, ta = (s.radius_a for s in h.sites)
    assert (li, ta, h.anion.radius_a) == pytest.approx((0.76, 0.64, 1.38))
    tau = float(perovskite.bartel_tau(li, ta, h.anion.radius_a, 1))
    assert tau == pytest.approx(1.38 / 0.64 - (1 - (0.76 / 0.64) / np.log(0.76 / 0.64)), rel=1e-9)
    assert tau > perovskite.BARTEL_TAU_MAX


def test_tau_needs_the_larger_ion_on_a():
    assert np.isnan(perovskite.bartel_tau(0.6, 0.7, 1.4, 2))


def candidates_for(host_id, ions, fraction=Fraction(1, 50)):
    pool = pd.DataFrame({"element": [e for e, _ in ions], "charge": [c for _, c in ions], "common": True})
    placed = enum.placements(hostlib.sites_frame([HOSTS[host_id]]), pool)
    # the radius rule runs before this one in a screen and removes ions without a radius
    placed = placed[placed["radius_a"].notna()]
    return enum.combine(placed, ENUMERATION, fraction)


def test_site_averaged_radii_of_a_codoped_titanate():
    frame = candidates_for("SrTiO3", [("La", 3), ("Cr", 3)])
    factors = perovskite.site_averaged(frame, HOSTS, ["perovskite"])
    row = factors[frame["candidate_id"] == "SrTiO3/Cr3+@Ti+La3+@Sr"].iloc[0]
    # 2 % La3+ (XII 1.36) on Sr (1.44), 2 % Cr3+ (VI 0.615) on Ti (0.605): Shannon 1976
    assert row["r_a"] == pytest.approx(0.98 * 1.44 + 0.02 * 1.36)
    assert row["r_b"] == pytest.approx(0.98 * 0.605 + 0.02 * 0.615)
    assert row["r_x"] == pytest.approx(1.40)
    assert row["n_a"] == pytest.approx(2.02)
    assert row["goldschmidt_t"] == pytest.approx(
        (row["r_a"] + 1.40) / (np.sqrt(2) * (row["r_b"] + 1.40)))


def test_filter_rejects_outside_the_window_and_leaves_other_families_alone():
    frame = pd.concat([candidates_for("BaTiO3", [("La", 3), ("Cr", 3)]),
                       candidates_for("TiO2-rutile", [("Cr", 3), ("Sb", 5)])], ignore_index=True)
    strict = {**LATTICE, "tolerance": {"min": 0.8, "max": 1.05}}
    kept, rejected = tolerance.apply(frame, HOSTS, strict)
    # BaTiO3 itself is at t = 1.06 > 1.05: every BaTiO3 candidate goes, with its value and threshold
    assert not kept["host"].eq("BaTiO3").any()
    assert set(rejected["host"]) == {"BaTiO3"}
    assert rejected["rule"].eq("tolerance").all() and rejected["threshold"].eq(1.05).all()
    assert rejected["value"].between(1.05, 1.07).all()
    assert rejected["detail"].str.startswith("Goldschmidt t 1.0").all()
    # rutile is not a perovskite: untouched, t and tau NaN
    rutile = kept[kept["host"] == "TiO2-rutile"]
    assert len(rutile) == (frame["host"] == "TiO2-rutile").sum()
    assert rutile["goldschmidt_t"].isna().all()
    # with the default window BaTiO3 candidates stay
    kept, rejected = tolerance.apply(frame, HOSTS, LATTICE)
    assert len(kept) == len(frame) and rejected.empty


def test_filter_tau_ceiling():
    frame = candidates_for("SrTiO3", [("La", 3)])
    kept, rejected = tolerance.apply(frame, HOSTS, {**LATTICE, "tau_max": 3.5})
    assert kept.empty and len(rejected) == len(frame)
    assert rejected["detail"].str.match(r"Bartel tau 3\.7\d >= 3\.5").all()


def test_filter_on_no_candidates_keeps_the_columns():
    # an earlier rule may remove every candidate of a shard (seen with hypothesis in test_invariants)
    frame = candidates_for("SrTiO3", [("La", 3)]).iloc[0:0]
    kept, rejected = tolerance.apply(frame, HOSTS, LATTICE)
    assert kept.empty and rejected.empty
    assert {"goldschmidt_t", "bartel_tau"} <= set(kept.columns)
