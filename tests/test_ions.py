"""Ion data against published and reference-library values."""
from __future__ import annotations

import pandas as pd
import pytest
from pymatgen.core.periodic_table import Species

from screening import ions
from screening.errors import DataMissingError

# Shannon, Acta Cryst. A32 (1976) 751, Table 1 (effective ionic radii, Angstrom); the values
# below are the well-known ones (from memory of the table, and every one is also checked
# against pymatgen's independent copy of the table in the next test).
SHANNON_1976 = [
    ("O", -2, 6, 1.40),
    ("O", -2, 2, 1.35),
    ("Ti", 4, 6, 0.605),
    ("Sr", 2, 12, 1.44),
    ("Ba", 2, 12, 1.61),
    ("Ca", 2, 12, 1.34),
    ("La", 3, 12, 1.36),
    ("Cr", 3, 6, 0.615),
    ("Nb", 5, 6, 0.64),
    ("Ta", 5, 6, 0.64),
    ("Sb", 5, 6, 0.60),
    ("Rh", 3, 6, 0.665),
    ("Zn", 2, 4, 0.60),
    ("Sn", 4, 6, 0.69),
    ("Na", 1, 12, 1.39),
    ("K", 1, 12, 1.64),
    ("Fe", 3, 6, 0.645),   # high spin
    ("W", 6, 6, 0.60),
]


@pytest.mark.parametrize("element,charge,cn,expected", SHANNON_1976)
def test_shannon_radii_match_the_1976_table(element, charge, cn, expected):
    # Source: Shannon 1976 via mendeleev's ionicradii table (our ion table).
    assert ions.shannon_radius(element, charge, cn) == pytest.approx(expected, abs=1e-3)


@pytest.mark.parametrize("element,charge,cn,expected", SHANNON_1976)
def test_mendeleev_and_pymatgen_copies_of_shannon_agree(element, charge, cn, expected):
    # Source: pymatgen's Species.get_shannon_radius, an independent copy of Shannon 1976.
    spin = "High Spin" if (element, charge) == ("Fe", 3) else ""
    reference = Species(element, charge).get_shannon_radius(ions.int_to_roman(cn), spin=spin)
    assert ions.shannon_radius(element, charge, cn) == pytest.approx(reference, abs=1e-3)


def test_high_spin_taken_for_3d_and_low_spin_for_4d_5d():
    # Common practice for oxides: 3d ions high spin, 4d/5d low spin.
    # Shannon 1976: Co3+ (VI) HS 0.61, LS 0.545; Fe3+ (VI) HS 0.645, LS 0.55.
    out = ions.lookup_radii(pd.DataFrame({"element": ["Co", "Fe"], "charge": [3, 3], "coordination": [6, 6]}))
    assert list(out["spin"]) == ["HS", "HS"]
    assert list(out["radius_a"]) == pytest.approx([0.61, 0.645], abs=1e-3)


def test_mulliken_electronegativity_of_titanium_and_oxygen():
    # (I1 + A)/2 with NIST first ionisation energies (Ti 6.828 eV, O 13.618 eV) and
    # electron affinities (Ti 0.079 eV, O 1.461 eV): Ti 3.45, O 7.54 eV (Pearson 1988 lists
    # 3.45 and 7.54; from memory).
    elements = ions.load_ion_data().elements
    assert elements.loc["Ti", "chi_mulliken_ev"] == pytest.approx(3.45, abs=0.01)
    assert elements.loc["O", "chi_mulliken_ev"] == pytest.approx(7.54, abs=0.01)


def test_negative_affinity_elements_follow_pearson():
    # Pearson, Inorg. Chem. 27 (1988) 734: Zn 4.45 eV, Cd 4.33 eV (from memory); taking the
    # missing affinity as zero would give I1/2 = 4.70 and 4.50 eV instead.
    elements = ions.load_ion_data().elements
    assert elements.loc["Zn", "chi_mulliken_ev"] == pytest.approx(4.45, abs=0.005)
    assert elements.loc["Cd", "chi_mulliken_ev"] == pytest.approx(4.33, abs=0.005)
    assert "Pearson" in elements.loc["Zn", "chi_source"]
    assert elements.loc["Zn", "ionization_ev"] / 2 > 4.6


def test_every_common_cation_has_a_finite_electronegativity():
    # The screen relies on chi for every pool element; no NaN may slip through (design rule).
    elements = ions.load_ion_data().elements
    pool = ["Li", "Na", "K", "Mg", "Ca", "Sr", "Ba", "Ti", "Cr", "Fe", "La", "Ce", "Sm", "Gd", "Yb", "Bi"]
    assert elements.loc[pool, "chi_mulliken_ev"].notna().all()


def test_crustal_abundance_and_radioactivity_from_mendeleev():
    # CRC Handbook (via mendeleev): O 461000 ppm, Si 282000 ppm; Th and U radioactive.
    elements = ions.load_ion_data().elements
    assert elements.loc["O", "abundance_crust_ppm"] == pytest.approx(461000)
    assert elements.loc["Si", "abundance_crust_ppm"] == pytest.approx(282000)
    assert bool(elements.loc["Th", "radioactive"]) and bool(elements.loc["U", "radioactive"])
    assert not bool(elements.loc["Ti", "radioactive"])


def test_missing_value_that_a_rule_needs_fails_loudly():
    # mendeleev has no crustal abundance for Tc (radioactive, no stable isotope).
    with pytest.raises(DataMissingError, match="Tc: abundance_crust_ppm"):
        ions.require_element_values(["Ti", "Tc"], ["abundance_crust_ppm"], context="test")


def test_missing_radius_is_nan_not_a_value_and_flags_estimates():
    # Cr3+ is tabulated only at VI (Shannon 1976): at XII there is nothing to estimate from.
    out = ions.lookup_radii(pd.DataFrame({"element": ["Cr", "Ni"], "charge": [3, 2], "coordination": [12, 12]}))
    assert pd.isna(out.loc[0, "radius_a"]) and not out.loc[0, "radius_estimated"]
    # Ni2+ is tabulated at IV, IVSQ, V, VI: XII is an extrapolation and must be marked.
    assert out.loc[1, "radius_estimated"] and out.loc[1, "radius_a"] > 0.69
    with pytest.raises(DataMissingError):
        ions.shannon_radius("Cr", 3, 12)


def test_cache_is_stamped_and_reused(tmp_path, monkeypatch):
    monkeypatch.setenv("SCREENING_CACHE_DIR", str(tmp_path))
    ions.load_ion_data.cache_clear()
    try:
        first = ions.load_ion_data()
        stamp = tmp_path / first.version / "stamp.json"
        assert stamp.is_file() and first.version in stamp.read_text()
        assert "mendeleev" in first.version and "pymatgen" in first.version
        ions.load_ion_data.cache_clear()
        again = ions.load_ion_data()
        pd.testing.assert_frame_equal(first.radii, again.radii)
    finally:
        ions.load_ion_data.cache_clear()


def test_ion_labels_round_trip():
    for element, charge, label in [("Cr", 3, "Cr3+"), ("N", -3, "N3-"), ("F", -1, "F-"), ("Na", 1, "Na+")]:
        assert ions.ion_label(element, charge) == label
        assert ions.parse_ion_label(label) == (element, charge)


def test_radii_resolved_earlier_in_the_process_give_the_same_answers():
    # lookup_radii keeps what it resolved (ions._RESOLVED_RADII); answers must not depend on what was
    # asked before.  Values: Shannon, Acta Cryst. A32 (1976) 751 -- Ti4+ VI 0.605 A, Sr2+ XII 1.44 A.
    query = pd.DataFrame({"element": ["Ti", "Sr", "Ni", "Cr", "Fe"], "charge": [4, 2, 2, 3, 3],
                          "coordination": [6, 12, 12, 12, 6]})
    ions._RESOLVED_RADII.clear()
    fresh = ions.lookup_radii(query)
    assert fresh.loc[0, "radius_a"] == pytest.approx(0.605) and fresh.loc[1, "radius_a"] == pytest.approx(1.44)
    ions._RESOLVED_RADII.clear()
    ions.lookup_radii(query.iloc[[3, 1]])          # a part first, in another order
    again = ions.lookup_radii(query)               # then the whole: part remembered, part resolved now
    pd.testing.assert_frame_equal(again, fresh)
    assert ions.lookup_radii(query.iloc[::-1].reset_index(drop=True)).iloc[::-1].reset_index(drop=True) \
        .equals(fresh)


def test_radius_lookups_from_many_threads_keep_one_row_per_query_row():
    # The shards of a local screen run as threads of one process and look radii up at the same time; a
    # race once stored keys twice and the look-up then returned more rows than it was asked (a workflow
    # failure).  Many threads asking overlapping questions must each get exactly their rows back.
    from concurrent.futures import ThreadPoolExecutor

    elements = ["Ti", "Sr", "Ni", "Cr", "Fe", "Nb", "Ta", "La", "Mn", "Co", "Zn", "Ga", "In", "Sn", "W", "Mo"]
    charges = [4, 2, 2, 3, 3, 5, 5, 3, 3, 2, 2, 3, 3, 4, 6, 6]
    queries = [pd.DataFrame({"element": elements[i:] + elements[:i], "charge": charges[i:] + charges[:i],
                             "coordination": [6 + (i + k) % 7 for k in range(len(elements))]})
               for i in range(len(elements))]
    for _ in range(3):
        ions._RESOLVED_RADII.clear()
        with ThreadPoolExecutor(max_workers=8) as pool:
            answers = list(pool.map(ions.lookup_radii, queries))
        for query, answer in zip(queries, answers):
            assert len(answer) == len(query)
            pd.testing.assert_frame_equal(answer[["element", "charge", "coordination"]], query)
