"""`screening edges`: raw Butler–Ginley edges (unchanged keys) plus the calibrated edges with their sigma."""
from __future__ import annotations

import json

import pytest

from screening import calibration, cli


def _edges(capsys, *args):
    assert cli.main(["edges", *args, "--json"]) == 0
    return json.loads(capsys.readouterr().out)


def test_raw_keys_unchanged_and_calibrated_keys_added(capsys):
    result = _edges(capsys, "TiO2", "--gap", "3.2")
    # raw: Xu & Schoonen, Am. Mineral. 85 (2000) 543, TiO2: E_CB -0.29 V, E_VB 2.91 V vs NHE (pH 0)
    assert result["cbm_v_nhe"] == pytest.approx(-0.29, abs=0.01)
    assert result["vbm_v_nhe"] == pytest.approx(2.91, abs=0.01)
    assert {"cbm_calibrated_v_nhe", "vbm_calibrated_v_nhe", "cbm_sigma_v", "vbm_sigma_v"} <= set(result)
    cal = calibration.load_calibration()
    # the calibrated edge is the fitted line at the raw edge; the sigma is the leave-one-out RMSE
    assert result["cbm_calibrated_v_nhe"] == pytest.approx(cal.slope * -0.288 + cal.intercept, abs=2e-3)
    assert result["cbm_sigma_v"] == pytest.approx(cal.loo_rmse_v, abs=1e-4)
    assert result["vbm_calibrated_v_nhe"] - result["cbm_calibrated_v_nhe"] == pytest.approx(3.2, abs=1e-3)
    assert result["calibration"]["n_reference"] == cal.n


def test_calibrated_edges_shift_nernstian_with_ph(capsys):
    # oxides: -0.0592 V per pH unit (common practice), for the calibrated edges as for the raw ones
    at_0 = _edges(capsys, "SrTiO3", "--gap", "3.25")
    at_7 = _edges(capsys, "SrTiO3", "--gap", "3.25", "--ph", "7")
    assert at_7["cbm_calibrated_v_nhe"] - at_0["cbm_calibrated_v_nhe"] == pytest.approx(-0.0592 * 7, abs=1e-3)
    assert at_7["cbm_v_nhe"] - at_0["cbm_v_nhe"] == pytest.approx(-0.0592 * 7, abs=1e-3)


def test_text_output_shows_raw_and_calibrated_with_uncertainty(capsys):
    assert cli.main(["edges", "SrTiO3", "--gap", "3.25", "--ph", "7"]) == 0
    out = capsys.readouterr().out
    assert "raw Butler–Ginley" in out and "calibrated" in out and "±" in out
    assert "V vs NHE at pH 7" in out


@pytest.mark.parametrize("args", [
    ["OgO2", "--gap", "3.0"],           # oganesson: no ionisation energy or electron affinity in mendeleev
    ["TiO2", "--gap", "12.5"],          # gap outside 0-12 eV
    ["TiO2", "--gap", "0"],
    ["TiO2", "--gap", "3.0", "--ph", "14.5"],   # pH outside 0-14
    ["TiO2", "--gap", "3.0", "--ph", "-1"],
])
def test_bad_input_is_one_line_and_exit_2(capsys, args):
    assert cli.main(["edges", *args]) == 2
    err = capsys.readouterr().err
    assert err.startswith("screening: error:") and err.count("\n") == 1
