"""Site preference of dopants in perovskites: textbook cases and the pieces it is built from.

Sources: Hautier et al., Inorg. Chem. 50 (2011) 656, as fitted in pymatgen's
SubstitutionProbability (the reference library); Shannon radii (1976); site
preferences that are common practice in titanate doping.
"""
from __future__ import annotations

from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from screening import enumerate as enum
from screening import hosts as hostlib
from screening import site_preference

REPO = Path(__file__).resolve().parents[1]
HOSTS = {h.id: h for h in hostlib.load_hosts(REPO / "candidates" / "hosts.yaml")}
WIDTH = 0.15  # the default mismatch ceiling (15 % size rule, common practice)


def table_for(host_id, element, charge):
    ions = pd.DataFrame({"host": [host_id], "element": [element], "charge": [charge]})
    return site_preference.site_likelihoods(ions, HOSTS, WIDTH).set_index("site")


def test_large_trivalent_lanthanide_prefers_the_a_site_of_strontium_titanate():
    # La3+ substitutes for Sr2+ in SrTiO3 (a donor on the A site; common practice)
    table = table_for("SrTiO3", "La", 3)
    assert set(table.index) == {"Sr", "Ti"}
    assert table.loc["Sr", "preferred_site"] and not table.loc["Ti", "preferred_site"]
    assert table.loc["Sr", "site_likelihood"] > 0.99
    assert table["site_likelihood"].sum() == pytest.approx(1.0)
    # both factors point the same way: Hautier's table and the radii (La3+ XII 1.36 vs Sr2+ 1.44 Å)
    assert table.loc["Sr", "substitution_probability"] > table.loc["Ti", "substitution_probability"]
    assert table.loc["Sr", "mismatch"] == pytest.approx(abs(1.36 - 1.44) / 1.44)


@pytest.mark.parametrize("host_id, element, charge, site", [
    ("BaTiO3", "Zr", 4, "Ti"),   # Ba(Zr,Ti)O3 solid solution: Zr on the B site (common practice)
    ("BaTiO3", "Ca", 2, "Ba"),   # (Ba,Ca)TiO3: Ca on the A site (common practice)
    ("SrTiO3", "Cr", 3, "Ti"),   # Cr3+ acceptor on Ti in SrTiO3 photocatalysts (common practice)
])
def test_textbook_site_preferences(host_id, element, charge, site):
    table = table_for(host_id, element, charge)
    assert table["preferred_site"].sum() == 1
    assert table.loc[site, "preferred_site"]


def test_probability_is_pymatgens_conditional_probability():
    from pymatgen.analysis.structure_prediction.substitution_probability import SubstitutionProbability
    from pymatgen.core import Species

    table = table_for("SrTiO3", "La", 3)
    reference = SubstitutionProbability()
    assert table.loc["Sr", "substitution_probability"] == pytest.approx(
        reference.cond_prob(Species("La", 3), Species("Sr", 2)))
    assert table.loc["Sr", "probability_source"] == "Hautier 2011 x radius"
    # the weight is probability x exp(-(m/w)^2), normalised over the two sites
    weight = table["substitution_probability"] * np.exp(-(table["mismatch"] / WIDTH) ** 2)
    assert np.allclose(table["site_likelihood"], weight / weight.sum())


def test_single_site_host_and_pairs():
    pool = pd.DataFrame({"element": ["La", "Cr"], "charge": [3, 3], "common": True})
    frame = pd.concat([
        enum.combine(enum.placements(hostlib.sites_frame([HOSTS[h]]), pool).dropna(subset=["radius_a"]),
                     {"singles": True, "pairs": True, "vacancy_compensation": True, "electron_compensation": False},
                     Fraction(1, 50)) for h in ("SrTiO3", "TiO2-rutile")], ignore_index=True)
    result = site_preference.candidate_likelihoods(frame, HOSTS, WIDTH)
    by_id = dict(zip(frame["candidate_id"], zip(result["site_likelihood"], result["preferred_site"])))
    # rutile has one cation site: nothing to choose
    assert by_id["TiO2-rutile/Cr3+@Ti+V_O"] == (1.0, True)
    # the textbook pair: both ions on their preferred sites
    likelihood, preferred = by_id["SrTiO3/Cr3+@Ti+La3+@Sr"]
    assert preferred and likelihood > 0.99
    # La3+ on the B site (La3+ VI 1.032 Å vs Ti4+ 0.605 Å) is enumerated but not preferred
    likelihood, preferred = by_id["SrTiO3/La3+@Ti+V_O"]
    assert not preferred and likelihood < 0.01


def test_fast_table_equals_pymatgens_substitution_probability():
    # pymatgen's SubstitutionProbability (Hautier et al., Inorg. Chem. 50 (2011) 656) is the reference.
    from pymatgen.analysis.structure_prediction.substitution_probability import SubstitutionProbability
    from pymatgen.core import Species

    from screening import site_preference

    reference = SubstitutionProbability()
    pairs = [(("La", 3), ("Sr", 2)), (("La", 3), ("Ti", 4)), (("Cr", 3), ("Ti", 4)), (("Nb", 5), ("Ti", 4)),
             (("Rh", 3), ("Ti", 4)), (("Zn", 2), ("Ga", 3)), (("Na", 1), ("Ta", 5)), (("Fe", 3), ("Fe", 3))]
    for ion, site_ion in pairs:
        expected = reference.cond_prob(Species(*ion), Species(*site_ion))
        assert site_preference.cond_prob(ion, site_ion) == pytest.approx(expected, rel=1e-9), (ion, site_ion)
    assert np.isnan(site_preference.cond_prob(("Xx", 3), ("Ti", 4)))
