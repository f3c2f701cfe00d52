"""``screening calibration``: the band-edge calibration as a table and a plot anyone can regenerate.

Shows what :mod:`screening.calibration` fits (Butler & Ginley, J. Electrochem. Soc. 125 (1978) 228,
estimate against the measured edges of ``data/band_edge_reference.csv``): for every reference row the
raw estimate, the measured CBM and, for the fitted rows, the leave-one-out prediction, then the fitted
line with its leave-one-out RMSE and MAE.  The figure plots measured against estimated CBM with the
1:1 line and the fitted line; the rows of the other edge kind (vacuum photoemission, not fitted by
default, see the calibration module) are drawn open, for comparison.  The README's calibration plot
is this command's output: ``screening calibration --figure docs/figures/calibration.png``.
"""
from __future__ import annotations

import json
import sys
from pathlib import Path

import numpy as np

from screening.errors import ScreeningError

FIGURE_SUFFIXES = (".png", ".svg")


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "calibration", help="the band-edge calibration: reference rows, leave-one-out error, plot",
        description="Fit the Butler-Ginley calibration on the shipped measured band edges and print every "
                    "reference row with its estimate, measurement and leave-one-out prediction (V vs NHE, "
                    "pH 0), and the leave-one-out RMSE and MAE; optionally draw measured against estimated "
                    "edges with the 1:1 line.")
    parser.add_argument("--figure", type=Path, default=None,
                        help="write the plot here (.png or .svg; the other format is written beside it)")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of the table")


def reference_rows():
    """Every reference row with kind, raw and measured CBM, and the leave-one-out CBM where fitted."""
    from screening import calibration

    table = calibration.load_reference()
    cal = calibration.fit_calibration()
    rows = table[["formula", "phase", "edge_kind", "edge", "gap_ev", "source", "from_memory"]].copy()
    rows["raw_cbm_v"] = calibration.raw_cbm(table)
    rows["measured_cbm_v"] = calibration.measured_cbm(table)
    fitted = table["edge_kind"].isin(cal.edge_kinds).to_numpy()
    rows["fitted"] = fitted
    loo = np.full(len(rows), np.nan)
    loo[fitted] = cal.loo_cbm_v  # fit_calibration keeps the table's order of the fitted rows
    rows["loo_cbm_v"] = loo
    return rows, cal


def draw(rows, cal):
    """Measured against estimated CBM, 1:1 line, fitted line; a matplotlib Figure (no pyplot)."""
    import matplotlib
    from matplotlib.figure import Figure

    matplotlib.rcParams.update({"font.size": 9, "svg.hashsalt": "screening-calibration", "svg.fonttype": "none"})
    fig = Figure(figsize=(6.4, 5.4), layout="constrained")
    ax = fig.subplots()
    fitted = rows[rows["fitted"]]
    other = rows[~rows["fitted"]]
    values = np.concatenate([rows["raw_cbm_v"], rows["measured_cbm_v"]])
    lo, hi = float(np.min(values)) - 0.3, float(np.max(values)) + 0.3
    grid = np.array([lo, hi])
    ax.plot(grid, grid, color="#8a8f93", lw=1.0, ls="--", label="1:1 (estimate = measurement)")
    ax.plot(grid, cal.apply(grid), color="#1f5f66", lw=1.6,
            label=f"fitted: {cal.slope:.2f} × estimate {cal.intercept:+.2f} V ({cal.model})")
    ax.scatter(fitted["raw_cbm_v"], fitted["measured_cbm_v"], s=34, color="#1f5f66", edgecolor="#1b1f23",
               linewidth=0.5, zorder=3, label=f"fitted rows ({', '.join(cal.edge_kinds)}), n = {cal.n}")
    if len(other):
        ax.scatter(other["raw_cbm_v"], other["measured_cbm_v"], s=30, facecolor="none", edgecolor="#a4472d",
                   linewidth=1.0, zorder=3, label=f"not fitted ({', '.join(sorted(set(other['edge_kind'])))}), "
                                                  f"n = {len(other)}")
    for _, row in rows.iterrows():
        ax.annotate(row["formula"], (row["raw_cbm_v"], row["measured_cbm_v"]), xytext=(4, 3),
                    textcoords="offset points", fontsize=6.5, color="#1b1f23" if row["fitted"] else "#a4472d")
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_aspect("equal")
    ax.set_xlabel("Butler–Ginley estimate of the CBM / V vs NHE (pH 0)")
    ax.set_ylabel("measured CBM / V vs NHE (pH 0)")
    ax.set_title(f"Band-edge calibration: leave-one-out MAE {cal.loo_mae_v:.2f} V, RMSE {cal.loo_rmse_v:.2f} V",
                 loc="left", fontsize=9.5)
    ax.legend(loc="upper left", fontsize=7, frameon=False)
    return fig


def write_figure(fig, path: Path) -> list[Path]:
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    path = Path(path)
    if path.suffix.lower() not in FIGURE_SUFFIXES:
        raise ScreeningError(f"figure must end in {' or '.join(FIGURE_SUFFIXES)}, got {path.suffix or 'no suffix'!r}",
                             source=str(path), field="--figure")
    if not path.parent.is_dir():
        raise ScreeningError("folder of the figure does not exist", source=str(path.parent), field="--figure")
    FigureCanvasAgg(fig)
    written = []
    for suffix in FIGURE_SUFFIXES:
        target = path.with_suffix(suffix)
        metadata = {"Software": None} if suffix == ".png" else {"Date": None, "Creator": None}
        fig.savefig(target, dpi=130, metadata=metadata)
        written.append(target)
    return written


def run(args) -> int:
    rows, cal = reference_rows()
    written = write_figure(draw(rows, cal), args.figure) if args.figure is not None else []
    if args.json:
        records = rows.drop(columns=["source"]).replace({np.nan: None}).to_dict(orient="records")
        print(json.dumps({"model": cal.model, "slope": cal.slope, "intercept_v": cal.intercept, "n": cal.n,
                          "edge_kinds": list(cal.edge_kinds), "loo_rmse_v": cal.loo_rmse_v,
                          "loo_mae_v": cal.loo_mae_v, "data_version": cal.data_version, "reason": cal.reason,
                          "rows": records, "figures": [str(p) for p in written]}))
        return 0
    out = sys.stdout
    out.write(f"{'formula':<10} {'kind':<13} {'edge':<4} {'estimate':>9} {'measured':>9} {'LOO pred.':>9} "
              f"{'residual':>9}  memory\n")
    for _, row in rows.iterrows():
        loo = row["loo_cbm_v"]
        loo_text = f"{loo:+9.2f}" if np.isfinite(loo) else f"{'–':>9}"
        residual = f"{row['measured_cbm_v'] - loo:+9.2f}" if np.isfinite(loo) else f"{'–':>9}"
        out.write(f"{row['formula']:<10} {row['edge_kind']:<13} {row['edge']:<4} {row['raw_cbm_v']:+9.2f} "
                  f"{row['measured_cbm_v']:+9.2f} {loo_text} {residual}  {row['from_memory']}\n")
    out.write(f"\nCBM (V vs NHE, pH 0; a measured VBM enters as VBM - gap).  Fit: {cal.model}, "
              f"measured = {cal.slope:.3f} x estimate {cal.intercept:+.3f} V on {cal.n} {'/'.join(cal.edge_kinds)} "
              f"rows; leave-one-out RMSE {cal.loo_rmse_v:.3f} V, MAE {cal.loo_mae_v:.3f} V "
              f"(data {cal.data_version}).\n{cal.reason}\n")
    for path in written:
        out.write(f"figure written to {path}\n")
    return 0
