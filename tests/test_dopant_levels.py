"""Dopant levels: the cited table, the Langer–Heinrich transfer between hosts, onsets and flags."""
from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from screening import calibration, dopant_levels
from screening.errors import ScreeningError

LEVELS_HEADER = ",".join(dopant_levels.COLUMNS)


def _mulliken(symbol: str) -> float:
    # Mulliken electronegativity (I1 + A) / 2 from pymatgen's element data (NIST ionisation energies and
    # electron affinities), not through the project's mendeleev-based ion table
    from pymatgen.core.periodic_table import Element

    e = Element(symbol)
    return (e.ionization_energies[0] + e.electron_affinity) / 2


def _raw_cbm(composition: dict[str, int], gap: float) -> float:
    # Butler & Ginley, J. Electrochem. Soc. 125 (1978) 228: geometric-mean chi, E_CB = chi - 4.5 - Eg/2 (pH 0)
    n = sum(composition.values())
    chi = math.exp(sum(k * math.log(_mulliken(el)) for el, k in composition.items()) / n)
    return chi - 4.5 - gap / 2


def _candidates(rows):
    """A minimal candidate frame with the columns enumerate.combine builds."""
    frame = pd.DataFrame(rows)
    for column, default in (("codopant_ion", ""), ("codopant_site_charge", np.nan), ("codopant_coordination", np.nan)):
        if column not in frame:
            frame[column] = default
    return frame


@pytest.fixture(scope="module")
def cal():
    return calibration.load_calibration()


def test_shipped_table_is_valid_and_every_row_cites_a_source():
    table = dopant_levels.load_levels()
    assert len(table) >= 1
    assert (table["source"].str.len() > 20).all()
    # every row says whether it was recalled; a row marked "no" names where its source was read
    assert set(table["from_memory"]) <= {"yes", "no"}
    read = table[table["from_memory"] == "no"]
    assert read["source"].str.contains("read at").all()
    assert (table["onset_ev"] < table["reference_gap_ev"]).all()


@pytest.mark.parametrize("ion, host, published_onset", [
    # Kato & Kudo, J. Phys. Chem. B 106 (2002) 5029: Sb,Cr-codoped TiO2 and SrTiO3, energy gaps 2.2 and 2.4 eV
    ("Cr3+", "TiO2", 2.2), ("Cr3+", "SrTiO3", 2.4),
    # Niishiro et al., J. Phys. Chem. C 111 (2007) 17420: Rh,Sb-codoped rutile TiO2, energy gap 2.1 eV
    ("Rh3+", "TiO2", 2.1),
])
def test_rows_read_from_the_papers_carry_the_published_onsets(ion, host, published_onset):
    table = dopant_levels.load_levels()
    row = table[(table["ion"] == ion) & (table["reference_host"] == host)]
    assert len(row) == 1 and row["from_memory"].iloc[0] == "no"
    assert row["onset_ev"].iloc[0] == pytest.approx(published_onset)
    assert row["codoped_with"].iloc[0] == "Sb5+"  # both papers hold the ion trivalent with Sb5+


def test_rh_in_rutile_predicted_from_srtio3_alone_matches_the_measured_onset(tmp_path, cal):
    # Leave the TiO2 row out, place Rh3+ from the SrTiO3 row (2.4 eV, Konta et al. 2004, from memory) in rutile
    # (gap 3.0 eV) and compare with the measured Rh,Sb-codoped rutile onset of 2.1 eV (Niishiro et al.,
    # J. Phys. Chem. C 111 (2007) 17420, read from the abstract); tolerance as in the Cr3+ check above.
    table = dopant_levels.load_levels()
    only = table[(table["ion"] == "Rh3+") & (table["reference_host"] == "SrTiO3")]
    path = tmp_path / "levels.csv"
    only.to_csv(path, index=False)
    frame = _candidates([{"dopant_ion": "Rh3+", "dopant_site_charge": 4, "dopant_coordination": 6, "kind": "single"}])
    out = dopant_levels.candidate_onsets(frame, ["TiO2"], [3.0], cal, path=path)
    assert out["level_flag"].iloc[0] == dopant_levels.TRANSFERRED
    assert abs(out["onset_ev"].iloc[0] - 2.1) < math.sqrt(2) * cal.loo_rmse_v
    # with the TiO2 row shipped, rutile uses its own measurement
    direct = dopant_levels.candidate_onsets(frame, ["TiO2"], [3.0], cal)
    assert direct["level_flag"].iloc[0] == dopant_levels.MEASURED
    assert direct["onset_ev"].iloc[0] == pytest.approx(2.1, abs=0.01)


def test_langer_heinrich_transfer_by_hand_srtio3_to_natao3(cal):
    # Cr3+ measured in SrTiO3 (onset 2.4 eV, gap 3.2 eV: Kato & Kudo, J. Phys. Chem. B 106 (2002) 5029,
    # read from the abstract) placed in NaTaO3 (gap 4.0 eV) by hand:
    #   E_level = CBM_cal(SrTiO3) + 2.4;  onset(NaTaO3) = E_level - CBM_cal(NaTaO3),
    # with CBM_cal = slope * CBM_raw + intercept and CBM_raw from pymatgen's Mulliken values.
    cbm_sto = cal.slope * _raw_cbm({"Sr": 1, "Ti": 1, "O": 3}, 3.2) + cal.intercept
    cbm_nto = cal.slope * _raw_cbm({"Na": 1, "Ta": 1, "O": 3}, 4.0) + cal.intercept
    by_hand = (cbm_sto + 2.4) - cbm_nto
    only_srtio3 = dopant_levels.load_levels()
    assert "SrTiO3" in set(only_srtio3.loc[only_srtio3["ion"] == "Cr3+", "reference_host"])
    frame = _candidates([{"dopant_ion": "Cr3+", "dopant_site_charge": 5, "dopant_coordination": 6, "kind": "single"}])
    out = dopant_levels.candidate_onsets(frame, ["NaTaO3"], [4.0], cal)
    # the shipped table holds Cr3+ in two hosts; NaTaO3 gets their mean, so compare with the SrTiO3 row alone
    levels = dopant_levels.absolute_levels(cal)
    sto_row = levels[(levels["ion"] == "Cr3+") & (levels["reference_host"] == "SrTiO3")].iloc[0]
    assert sto_row["level_v_nhe_ph0"] == pytest.approx(cbm_sto + 2.4, abs=0.01)
    mean_level = levels.loc[levels["ion"] == "Cr3+", "level_v_nhe_ph0"].mean()
    assert out["onset_ev"].iloc[0] == pytest.approx(mean_level - cbm_nto, abs=0.01)
    assert out["level_flag"].iloc[0] == dopant_levels.TRANSFERRED
    # the two Cr3+ rows (SrTiO3 and rutile) agree within the ~0.1 eV reading uncertainty of a diffuse-
    # reflectance onset (stated in the level table's header; common practice)
    assert abs(by_hand - out["onset_ev"].iloc[0]) < 0.1


def test_cr_in_rutile_predicted_from_srtio3_alone_matches_the_measured_onset(tmp_path, cal):
    # Leave the TiO2 row out, predict Cr3+ in rutile (gap 3.0 eV) from the SrTiO3 row only, and compare with
    # the measured TiO2:Cr,Sb onset of 2.2 eV (Kato & Kudo 2002, read from the abstract).  Each calibrated edge
    # carries sigma = the leave-one-out RMSE; a difference of two edges sqrt(2) sigma.
    table = dopant_levels.load_levels()
    only = table[(table["ion"] == "Cr3+") & (table["reference_host"] == "SrTiO3")]
    path = tmp_path / "levels.csv"
    only.to_csv(path, index=False)
    frame = _candidates([{"dopant_ion": "Cr3+", "dopant_site_charge": 4, "dopant_coordination": 6, "kind": "single"}])
    out = dopant_levels.candidate_onsets(frame, ["TiO2"], [3.0], cal, path=path)
    assert abs(out["onset_ev"].iloc[0] - 2.2) < math.sqrt(2) * cal.loo_rmse_v
    # a visible-light absorber: onset below 3.1 eV (400 nm, hc/lambda)
    assert out["onset_ev"].iloc[0] < 1239.84 / 400


def test_codoped_srtio3_known_visible_photocatalyst_has_a_visible_onset(cal):
    # La,Cr-codoped SrTiO3 (the Cr3+ level of Sb,Cr-SrTiO3, Kato & Kudo 2002, read from the abstract): onset in the
    # visible, below the host gap, measured in this composition
    frame = _candidates([{"dopant_ion": "Cr3+", "dopant_site_charge": 4, "dopant_coordination": 6,
                          "codopant_ion": "La3+", "codopant_site_charge": 2, "codopant_coordination": 12,
                          "kind": "pair"}])
    out = dopant_levels.candidate_onsets(frame, ["SrTiO3"], [3.25], cal)
    assert 1239.84 / 700 < out["onset_ev"].iloc[0] < 1239.84 / 400
    assert out["level_flag"].iloc[0] == dopant_levels.MEASURED and out["level_same_host"].iloc[0]
    assert "La3+: no level data" in out["level_note"].iloc[0]


def test_dopant_without_data_keeps_the_host_gap_and_is_flagged(cal):
    # Fe3+ is deliberately absent from the table (no measured onset read or recalled): never a made-up value
    assert "Fe3+" not in set(dopant_levels.load_levels()["ion"])
    frame = _candidates([{"dopant_ion": "Fe3+", "dopant_site_charge": 4, "dopant_coordination": 6, "kind": "single"}])
    out = dopant_levels.candidate_onsets(frame, ["SrTiO3"], [3.25], cal)
    assert out["onset_ev"].iloc[0] == 3.25
    assert out["level_flag"].iloc[0] == dopant_levels.NO_DATA


def test_level_outside_the_new_gap_gives_the_host_gap(cal):
    # a host whose CBM lies 2.5 V below the level's absolute position with a gap of 2.0 eV: the level is in
    # its valence band, so the onset is the host gap (capped) and the flag says so
    levels = dopant_levels.absolute_levels(cal)
    level = levels.loc[levels["ion"] == "N3-", "level_v_nhe_ph0"].mean()
    query = pd.DataFrame({"ion": ["N3-", "N3-"], "anion": [True, True], "coordination": [3, 3],
                          "host_formula": ["ZnO", "ZnO"], "host_gap_ev": [2.0, 3.3],
                          "host_cbm_v": [level - 2.5, level - 2.5]})
    out = dopant_levels.ion_levels(query, cal)
    assert list(out["in_gap"]) == [False, True]
    assert out["ion_onset_ev"].iloc[1] == pytest.approx(2.5)


def test_pair_takes_the_highest_occupied_level(cal):
    # Cr3+ (about 2.2 eV in rutile) and N3- (about 2.5 eV in anatase) together in TiO2: the smaller onset wins
    frame = _candidates([{"dopant_ion": "Cr3+", "dopant_site_charge": 4, "dopant_coordination": 6,
                          "codopant_ion": "N3-", "codopant_site_charge": -2, "codopant_coordination": 3,
                          "kind": "pair"}])
    out = dopant_levels.candidate_onsets(frame, ["TiO2"], [3.0], cal)
    single = dopant_levels.candidate_onsets(frame.assign(kind="single", codopant_ion=""), ["TiO2"], [3.0], cal)
    assert out["onset_ev"].iloc[0] == pytest.approx(single["onset_ev"].iloc[0])
    assert "N3-" in out["level_note"].iloc[0] and "Cr3+" in out["level_note"].iloc[0]


@pytest.mark.parametrize("row, field", [
    ("Cr3+,cation,6,SrTiO3,3.2,3.5,,a published source of the row,yes,low", "onset_ev"),
    ("Cr3+,cation,6,SrTiO3,14,2.4,,a published source of the row,yes,low", "reference_gap_ev"),
    ("Cr3+,interstitial,6,SrTiO3,3.2,2.4,,a published source of the row,yes,low", "site"),
    ("Cr3+,cation,6,SrTiO3,3.2,2.4,,,yes,low", "source"),
    ("Cr,cation,6,SrTiO3,3.2,2.4,,a published source of the row,yes,low", "ion"),
])
def test_bad_level_table_names_the_field(tmp_path, row, field):
    path = tmp_path / "levels.csv"
    path.write_text(LEVELS_HEADER + "\n" + row + "\n")
    with pytest.raises(ScreeningError) as info:
        dopant_levels.load_levels(path)
    assert info.value.field == field and str(path) in str(info.value)
