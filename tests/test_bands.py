"""Tests for screening.bands against published values.

* Butler–Ginley edges against the table of Xu & Schoonen, Am. Mineral. 85 (2000) 543 (tests/data/
  xu_schoonen_2000_table.csv; most rows from memory, see that file's header for the provenance of each).
* Water levels against the Gibbs energy of formation of liquid water (NIST-JANAF / CODATA key values) and
  CODATA constants (through scipy.constants).
* The free-electron offset 4.5 eV against the IUPAC 4.44 eV (Trasatti, Pure Appl. Chem. 58 (1986) 955).
"""
from math import log
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from screening import bands, formulas

TABLE_FILE = Path(__file__).with_name("data") / "xu_schoonen_2000_table.csv"
TOLERANCE = 0.05  # eV for chi, V for E_CB: the bound; do not loosen it to make rows pass

XU_SCHOONEN = pd.read_csv(TABLE_FILE, comment="#")

# Rows that differ by more than TOLERANCE, each for a documented data-source reason: Xu & Schoonen used the
# element values of Pearson, Inorg. Chem. 27 (1988) 734, and mendeleev carries newer ionisation energies or
# electron affinities for these elements.  Differences below are what this code measured (ours - table).
# Element chi "Pearson" is his tabulated (I + A)/2 as transcribed in a public element-data compilation
# (it agrees with what we recall of his table); "mendeleev" is ours.
DATA_SOURCE_ROWS = {
    "ZrO2": "chi -0.055 eV, E_CB -0.055 V: chi(Zr) mendeleev 3.530 eV (I1 6.634 + A 0.426) vs Pearson 3.64 eV, "
            "whose I1 + A = 7.28 eV implies I1 ~6.85 eV, the older first ionisation energy of Zr",
    "Ta2O5": "chi -0.068 eV, E_CB -0.068 V: chi(Ta) mendeleev 3.936 eV (I1 7.550 + A 0.322) vs Pearson 4.11 eV, "
             "whose I1 + A = 8.22 eV implies I1 ~7.90 eV, the older first ionisation energy of Ta",
    "Nb2O5": "chi -0.073 eV, E_CB -0.073 V: chi(Nb) mendeleev 3.838 eV (I1 6.759 + A 0.917) vs Pearson 4.0 eV "
             "(I1 + A = 8.0 eV): older ionisation energy and affinity of Nb",
    "Bi2O3": "chi -0.313 eV, E_CB -0.313 V: chi(Bi) mendeleev 4.114 eV (I1 7.286 + A 0.942) vs Pearson 4.69 eV "
             "(I1 + A = 9.38 eV); the standard I1 and A of Bi do not give Pearson's value, cause not identified",
    "SrTiO3": "chi +0.377 eV, E_CB +0.377 V: chi(Sr) mendeleev 2.871 eV (I1 5.695 + A +0.048, bound Sr- anion) "
              "vs Pearson 2.0 eV, which implies a negative affinity of about -1.7 eV for Sr",
}

# Pearson 1988 element chi (eV) for the elements in the table, as transcribed in a public element-data
# compilation (periodic-table data of klbproductions.com, copied into an open MATLAB element set); used only
# to show that the table rows follow from Pearson's element values, i.e. that the rows above differ because
# of element data and not because the table was mis-remembered.
PEARSON_CHI = {"O": 7.54, "S": 6.22, "Ti": 3.45, "Zn": 4.45, "Sn": 4.30, "W": 4.40, "Fe": 4.06, "Ni": 4.40,
               "Cu": 4.48, "Zr": 3.64, "Ta": 4.11, "In": 3.1, "Nb": 4.0, "V": 3.6, "Bi": 4.69, "Ga": 3.2,
               "Pb": 3.90, "Ag": 4.44, "Cd": 4.33, "Sr": 2.0, "K": 2.42, "Mo": 3.9}


def _row(formula: str) -> pd.Series:
    return XU_SCHOONEN.set_index("formula").loc[formula]


def _ours(formula: str) -> tuple[float, float]:
    """(chi, E_CB) from our code, with the table's gap."""
    chi = bands.electronegativity(formulas.parse_formula(formula))
    cbm, _ = bands.band_edges(chi, _row(formula)["gap_ev"])
    return chi, cbm


def test_table_file_is_self_consistent():
    # Xu & Schoonen: E_CB = chi - 4.5 - Eg/2 and E_VB = E_CB + Eg; catches a mistyped row (0.01 = print rounding,
    # 0.006 for MoS2 whose gap has two decimals).
    t = XU_SCHOONEN
    np.testing.assert_allclose(t["chi_ev"] - 4.5 - t["gap_ev"] / 2, t["ecb_v_nhe"], atol=0.006)
    np.testing.assert_allclose(t["ecb_v_nhe"] + t["gap_ev"], t["evb_v_nhe"], atol=0.011)
    assert t["formula"].is_unique
    assert t["provenance"].notna().all()


def test_known_row_tio2():
    # Methods sheet / Xu & Schoonen 2000: TiO2 chi 5.81 eV, Eg 3.2, E_CB -0.29 V, E_VB 2.91 V vs NHE.
    chi = bands.electronegativity({"Ti": 1, "O": 2})
    cbm, vbm = bands.band_edges(chi, 3.2)
    assert chi == pytest.approx(5.81, abs=0.01)
    assert cbm == pytest.approx(-0.29, abs=0.01)
    assert vbm == pytest.approx(2.91, abs=0.01)


AGREEING = [f for f in XU_SCHOONEN["formula"] if f not in DATA_SOURCE_ROWS]


@pytest.mark.parametrize("formula", AGREEING)
def test_row_agrees_with_xu_schoonen(formula):
    # Xu & Schoonen 2000, Tables 1-2 (values from memory unless the file says otherwise)
    row = _row(formula)
    chi, cbm = _ours(formula)
    assert abs(chi - row["chi_ev"]) <= TOLERANCE, f"chi {chi:.3f} vs {row['chi_ev']}"
    assert abs(cbm - row["ecb_v_nhe"]) <= TOLERANCE, f"E_CB {cbm:.3f} vs {row['ecb_v_nhe']}"


@pytest.mark.parametrize("formula", [
    pytest.param(f, marks=pytest.mark.xfail(strict=True, reason=reason), id=f)
    for f, reason in DATA_SOURCE_ROWS.items()])
def test_row_off_because_of_pearson_vs_mendeleev_element_data(formula):
    # Same check and tolerance as above; these rows are known to fail (see DATA_SOURCE_ROWS). strict=True makes
    # a row that starts to agree (e.g. after an element-data change) fail loudly, so the list stays true.
    row = _row(formula)
    chi, cbm = _ours(formula)
    assert abs(chi - row["chi_ev"]) <= TOLERANCE
    assert abs(cbm - row["ecb_v_nhe"]) <= TOLERANCE


@pytest.mark.parametrize("formula", list(DATA_SOURCE_ROWS))
def test_data_source_reason_explains_the_difference(formula):
    # The documented cause, checked: with Pearson's element values the row is reproduced (to print rounding),
    # and the element values differ by what the reason string says.
    composition = formulas.parse_formula(formula)
    total = sum(float(v) for v in composition.values())
    chi_pearson = np.exp(sum(float(n) * log(PEARSON_CHI[el]) for el, n in composition.items()) / total)
    assert chi_pearson == pytest.approx(_row(formula)["chi_ev"], abs=0.015)
    chi, _ = _ours(formula)
    measured = chi - _row(formula)["chi_ev"]
    stated = float(DATA_SOURCE_ROWS[formula].split()[1])
    assert measured == pytest.approx(stated, abs=0.0015)


def test_every_table_row_follows_from_pearson_element_values():
    # Independent check of the recalled table: each row's chi is the geometric mean of Pearson 1988 element
    # values (as transcribed, see PEARSON_CHI) to within print rounding.
    for formula, chi_table in zip(XU_SCHOONEN["formula"], XU_SCHOONEN["chi_ev"]):
        composition = formulas.parse_formula(formula)
        total = sum(float(v) for v in composition.values())
        chi = np.exp(sum(float(n) * log(PEARSON_CHI[el]) for el, n in composition.items()) / total)
        assert chi == pytest.approx(chi_table, abs=0.015), formula


def test_at_least_eight_binary_oxides_and_sulfides_agree():
    # Issue 3: at least eight binary oxides and sulfides within 0.05 eV of Xu & Schoonen.
    agreeing = []
    for formula in XU_SCHOONEN["formula"]:
        composition = formulas.parse_formula(formula)
        if len(composition) != 2 or not ({"O", "S"} & set(composition)):
            continue
        chi, cbm = _ours(formula)
        row = _row(formula)
        if abs(chi - row["chi_ev"]) <= TOLERANCE and abs(cbm - row["ecb_v_nhe"]) <= TOLERANCE:
            agreeing.append(formula)
    assert len(agreeing) >= 8, agreeing


def test_vectorised_electronegativity_matches_single():
    # electronegativity_of_amounts must give the same numbers as the per-formula function on the table rows
    comps = [formulas.parse_formula(f) for f in XU_SCHOONEN["formula"]]
    amounts = pd.DataFrame([{k: float(v) for k, v in c.items()} for c in comps]).fillna(0.0)
    vector = bands.electronegativity_of_amounts(amounts)
    single = np.array([bands.electronegativity(c) for c in comps])
    np.testing.assert_allclose(vector, single, rtol=1e-12)


# --- water levels and scales ------------------------------------------------------------------------------

def test_water_splitting_potential_from_gibbs_energy():
    # Delta_f G(H2O, l) = -237.13 kJ/mol (NIST-JANAF / CODATA key values; common practice); two electrons per
    # H2O, so E = 237.13 kJ/mol / (2 F) = 1.2288 V, with F from CODATA (scipy.constants).
    expected = 237.13e3 / (2 * constants.physical_constants["Faraday constant"][0])
    for ph in (0.0, 3.5, 7.0, 14.0):
        hydrogen, oxygen = bands.water_levels(ph)
        assert oxygen - hydrogen == pytest.approx(expected, abs=5e-4)
    assert bands.water_levels(0.0) == pytest.approx((0.0, 1.229), abs=1e-9)


def test_nernst_slope_from_codata():
    # RT ln(10) / F at 298.15 K from CODATA R and F (scipy.constants) = 0.05916 V per pH
    slope = constants.R * 298.15 * log(10) / constants.physical_constants["Faraday constant"][0]
    assert slope == pytest.approx(0.05916, abs=1e-5)
    assert bands.NERNST_SLOPE_V == pytest.approx(slope, abs=1e-4)
    h0, o0 = bands.water_levels(0.0)
    h7, o7 = bands.water_levels(7.0)
    assert (h0 - h7) / 7 == pytest.approx(slope, abs=1e-4)
    assert (o0 - o7) / 7 == pytest.approx(slope, abs=1e-4)
    # oxide edges shift with the same slope (Nernstian flat-band behaviour, common practice)
    cbm0, vbm0 = bands.band_edges(5.81, 3.2, ph=0.0)
    cbm7, vbm7 = bands.band_edges(5.81, 3.2, ph=7.0)
    assert (cbm0 - cbm7) / 7 == pytest.approx(slope, abs=1e-4)
    assert vbm7 - cbm7 == pytest.approx(3.2)


def test_free_electron_offset_4p5_vs_iupac_4p44(monkeypatch):
    # The project uses 4.5 eV (Butler-Ginley / Xu & Schoonen); the IUPAC value is 4.44 eV (Trasatti 1986).
    # Switching moves every edge by +0.06 V.
    assert bands.FREE_ELECTRON_EV == 4.5
    cbm_45, vbm_45 = bands.band_edges(np.array([5.81, 6.59]), np.array([3.2, 2.7]))
    monkeypatch.setattr(bands, "FREE_ELECTRON_EV", 4.44)
    cbm_444, vbm_444 = bands.band_edges(np.array([5.81, 6.59]), np.array([3.2, 2.7]))
    np.testing.assert_allclose(cbm_444 - cbm_45, 0.06, atol=1e-12)
    np.testing.assert_allclose(vbm_444 - vbm_45, 0.06, atol=1e-12)
