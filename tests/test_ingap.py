"""In-gap state risk: d-electron counts, crystal-field filling, and how compensation changes the risk."""
from __future__ import annotations

import pandas as pd
import pytest
from pymatgen.core.periodic_table import Species

from screening import hosts as hostlib, ingap
from screening.errors import ScreeningError


@pytest.mark.parametrize("element, charge, count", [
    # textbook d counts (group number - oxidation state; Shriver & Atkins, from memory)
    ("Ti", 4, 0), ("Cr", 3, 3), ("Cr", 6, 0), ("Fe", 3, 5), ("Rh", 3, 6), ("Rh", 4, 5), ("Ni", 2, 8),
    ("Cu", 2, 9), ("Zn", 2, 10), ("Nb", 5, 0), ("W", 6, 0), ("Ir", 4, 5),
])
def test_d_electron_count_of_textbook_ions(element, charge, count):
    assert ingap.electron_count(element, charge) == ("d", count)
    if element in ("W", "Ir"):
        return  # pymatgen's crystal-field helper refuses 5d elements (their 4f14 sorts after 6s)
    # the same count from pymatgen's electronic structures: (n-1)d + ns - oxidation state, as its
    # Species.get_crystal_field_spin computes it (high-spin unpaired electrons = n for n <= 5, else 10 - n)
    assert Species(element, charge).get_crystal_field_spin("oct", "high") == (count if count <= 5 else 10 - count)


@pytest.mark.parametrize("element, charge, expected", [
    ("Sb", 5, ("d", 10)), ("Bi", 3, ("d", 10)), ("Sn", 4, ("d", 10)),   # filled (n-1)d10 (common practice)
    ("Al", 3, ("none", 0)), ("Mg", 2, ("none", 0)), ("Sr", 2, ("none", 0)),
    ("La", 3, ("d", 0)), ("Ce", 3, ("f", 1)), ("Ce", 4, ("f", 0)), ("Eu", 3, ("f", 6)), ("Lu", 3, ("f", 14)),
])
def test_electron_count_outside_the_d_series(element, charge, expected):
    # [Xe] 4f^n of lanthanide ions: Ce3+ 4f1, Eu3+ 4f6, Lu3+ 4f14 (textbook configurations)
    assert ingap.electron_count(element, charge) == expected


@pytest.mark.parametrize("element, charge", [("Cr", 3), ("Mn", 2), ("Fe", 3), ("Co", 2), ("Co", 3), ("Ni", 2),
                                             ("Cu", 2), ("Rh", 3), ("Rh", 4), ("Ru", 4), ("Mo", 4), ("Mn", 3)])
def test_unpaired_electrons_of_the_filling_match_pymatgen(element, charge):
    # 3d high spin, 4d/5d low spin (common practice); pymatgen's get_crystal_field_spin counts the unpaired
    # electrons of the same textbook octahedral and tetrahedral schemes
    _, count = ingap.electron_count(element, charge)
    period = 4 if element in ("Cr", "Mn", "Fe", "Co", "Ni", "Cu") else 5
    spin = ingap.spin_for_period(period)
    for cn, geometry in ((6, "oct"), (4, "tet")):
        filled = ingap.occupation(count, cn, spin)
        up = sum(n for _, arrow, n, _ in filled if arrow == "\u2191")
        down = sum(n for _, arrow, n, _ in filled if arrow == "\u2193")
        expected_spin = "high" if cn == 4 else spin  # tetrahedral ions are high spin (textbook)
        assert up - down == Species(element, charge).get_crystal_field_spin(geometry, expected_spin)


def test_ion_risk_rule_on_textbook_ions():
    # Rh3+ d6 low spin: t2g6 filled, eg empty -> low; Rh4+ d5 low spin: t2g5, one hole -> high
    assert ingap.ion_risk("Rh", 3, 6)[0] == "low"
    assert ingap.ion_risk("Rh", 4, 6)[0] == "high"
    # Cr3+ d3 octahedral: t2g-up 3 of 3 (closed spin subshell), t2g half filled overall -> medium
    assert ingap.ion_risk("Cr", 3, 6)[0] == "medium"
    # Cr4+ d2: t2g-up 2 of 3 -> high; Cu2+ d9: eg-down 1 of 2 -> high
    assert ingap.ion_risk("Cr", 4, 6)[0] == "high"
    assert ingap.ion_risk("Cu", 2, 6)[0] == "high"
    # closed shells: Ti4+ d0, Sb5+ d10, Zn2+ d10 tetrahedral, Al3+ no d -> low
    for ion in (("Ti", 4, 6), ("Sb", 5, 6), ("Zn", 2, 4), ("Al", 3, 6), ("La", 3, 12)):
        assert ingap.ion_risk(*ion)[0] == "low", ion
    # Cr6+ d0 of the 3d series: its empty 3d states lie low (Kato & Kudo 2002, from memory) -> medium
    assert ingap.ion_risk("Cr", 6, 6)[0] == "medium"


def _host(formula="SrTiO3", sites=(("Sr", 2, 12), ("Ti", 4, 6))):
    return hostlib.Host(id=formula, formula=formula, family="perovskite", gap_ev=3.25, gap_source="test",
                        sites=tuple(hostlib.Site(label=e, element=e, oxidation_state=q, coordination=cn,
                                                 multiplicity=1, radius_a=1.0, radius_estimated=False)
                                    for e, q, cn in sites),
                        anion=hostlib.Site(label="O", element="O", oxidation_state=-2, coordination=6,
                                           multiplicity=3, radius_a=1.4, radius_estimated=False))


def _candidate(dopant, charge, site_charge, compensation, codopant=None, kind="single"):
    row = {"host": "SrTiO3", "kind": kind, "compensation": compensation, "dopant_element": dopant,
           "dopant_charge": charge, "dopant_site_charge": site_charge, "dopant_coordination": 6,
           "codopant_element": "", "codopant_charge": 0, "codopant_site_charge": 0, "codopant_coordination": 0}
    if codopant:
        element, q, site_q, cn = codopant
        row.update(codopant_element=element, codopant_charge=q, codopant_site_charge=site_q,
                   codopant_coordination=cn)
    return row


def test_compensation_held_filled_shell_is_not_flagged_but_uncompensated_is():
    # Rh in SrTiO3: with a donor codopant (Sb5+, Konta et al. 2004 / Kudo's group, from memory) the ion stays
    # Rh3+ t2g6 -> low; with only oxygen vacancies it can oxidise to the site valence, Rh4+ t2g5 -> high
    frame = pd.DataFrame([
        _candidate("Rh", 3, 4, "codopant", ("Sb", 5, 4, 6), kind="pair"),
        _candidate("Rh", 3, 4, "oxygen_vacancy"),
        _candidate("Cr", 3, 4, "codopant", ("La", 3, 2, 12), kind="pair"),
        _candidate("Cr", 3, 4, "oxygen_vacancy"),
    ])
    risk = ingap.candidate_risk(frame, {"SrTiO3": _host()})
    assert list(risk["ingap_risk"]) == ["low", "high", "medium", "high"]
    assert "Rh4+" in risk["ingap_reason"].iloc[1]
    assert "Cr4+" in risk["ingap_reason"].iloc[3]
    assert "Sb5+" in risk["ingap_reason"].iloc[0]


def test_vacancy_compensated_ion_that_cannot_oxidise_is_medium_for_the_vacancies():
    # Al3+ has no d electrons to give up (no Al4+): only the oxygen vacancies count -> medium
    frame = pd.DataFrame([_candidate("Al", 3, 4, "oxygen_vacancy")])
    risk = ingap.candidate_risk(frame, {"SrTiO3": _host()})
    assert risk["ingap_risk"].iloc[0] == "medium" and "oxygen vacancies" in risk["ingap_reason"].iloc[0]


def test_electron_compensation_reduces_a_d0_host():
    # Nb5+ on Ti4+ compensated by electrons: Ti4+ -> Ti3+ d1 (common practice) -> high in a titanate,
    # medium where the host has no d0 cation (SnO2: Sn4+ is d10)
    frame = pd.DataFrame([_candidate("Nb", 5, 4, "electrons")])
    assert ingap.candidate_risk(frame, {"SrTiO3": _host()})["ingap_risk"].iloc[0] == "high"
    sno2 = _host("SnO2", (("Sn", 4, 6),))
    assert ingap.candidate_risk(frame.assign(host="SnO2"), {"SnO2": sno2})["ingap_risk"].iloc[0] == "medium"


def test_impossible_ion_and_unknown_risk_are_errors():
    with pytest.raises(ScreeningError):
        ingap.electron_count("Ti", 5)        # Ti has only four valence electrons
    with pytest.raises(ScreeningError):
        ingap.risk_penalty(["low", "severe"])
    assert list(ingap.risk_penalty(["low", "medium", "high"])) == [0.0, -0.5, -1.0]
