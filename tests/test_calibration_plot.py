"""Tests for ``screening calibration`` (screening.calibration_plot): table, JSON and figure of the fit.

Outside references: numpy.polyfit for an independent leave-one-out by hand; the PNG file signature
(PNG specification, ISO/IEC 15948, section 5.2: the 8 bytes 89 50 4E 47 0D 0A 1A 0A) and the SVG root element.
"""
from __future__ import annotations

import json

import numpy as np
import pytest

from screening import calibration, cli


def _json(capsys, *extra):
    code = cli.main(["calibration", "--json", *extra])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return json.loads(captured.out)


def test_json_rows_and_leave_one_out_match_a_fit_by_hand(capsys):
    report = _json(capsys)
    table = calibration.load_reference()
    assert len(report["rows"]) == len(table)
    fitted = [r for r in report["rows"] if r["fitted"]]
    assert len(fitted) == report["n"] == int((table["edge_kind"] == "flatband").sum())
    x = np.array([r["raw_cbm_v"] for r in fitted])
    y = np.array([r["measured_cbm_v"] for r in fitted])
    loo = np.array([np.polyval(np.polyfit(np.delete(x, i), np.delete(y, i), 1), x[i]) for i in range(len(x))])
    if report["model"] == "LinearRegression":
        np.testing.assert_allclose([r["loo_cbm_v"] for r in fitted], loo, atol=1e-9)
        assert report["loo_mae_v"] == pytest.approx(np.mean(np.abs(y - loo)), abs=1e-9)
    assert report["loo_mae_v"] == pytest.approx(calibration.fit_calibration().loo_mae_v)
    assert all(r["loo_cbm_v"] is None for r in report["rows"] if not r["fitted"])


def test_figure_is_written_as_png_and_svg(tmp_path, capsys):
    report = _json(capsys, "--figure", str(tmp_path / "cal.png"))
    png, svg = tmp_path / "cal.png", tmp_path / "cal.svg"
    assert report["figures"] == [str(png), str(svg)]
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    text = svg.read_text(encoding="utf-8")
    assert "<svg" in text and "leave-one-out MAE" in text  # the title states the error it plots


def test_table_prints_every_row_and_the_error(capsys):
    assert cli.main(["calibration"]) == 0
    out = capsys.readouterr().out
    cal = calibration.fit_calibration()
    assert f"MAE {cal.loo_mae_v:.3f} V" in out and f"RMSE {cal.loo_rmse_v:.3f} V" in out
    assert len([line for line in out.splitlines() if line.split(" ")[0] in set(calibration.load_reference()["formula"])]) \
        == len(calibration.load_reference())


@pytest.mark.parametrize("name, words", [("cal.jpg", "must end in .png or .svg"),
                                         ("missing/cal.png", "does not exist")])
def test_bad_figure_path_is_one_line_exit_2(tmp_path, capsys, name, words):
    code = cli.main(["calibration", "--figure", str(tmp_path / name)])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and err.startswith("screening: error: ") and words in err


def test_readme_figure_is_current():
    # The README shows docs/figures/calibration.png; its SVG twin carries the title text.  After an edit of
    # the reference table, regenerate with: screening calibration --figure docs/figures/calibration.png
    from pathlib import Path

    root = Path(__file__).resolve().parents[1]
    svg = (root / "docs" / "figures" / "calibration.svg").read_text(encoding="utf-8")
    cal = calibration.fit_calibration()
    assert f"leave-one-out MAE {cal.loo_mae_v:.2f} V, RMSE {cal.loo_rmse_v:.2f} V" in svg
    assert f"n = {cal.n}" in svg
    assert "docs/figures/calibration.png" in (root / "README.md").read_text(encoding="utf-8")
