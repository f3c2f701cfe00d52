"""Calibration of Butler–Ginley band edges against measured edges, with leave-one-out uncertainty.

Method
------
The raw conduction-band edge of :mod:`screening.bands` (Butler & Ginley, J. Electrochem. Soc. 125 (1978)
228; E_CB = chi - 4.5 eV - Eg/2 at pH 0) is regressed on measured edges of the reference table
``data/band_edge_reference.csv`` (flat-band potentials with CBM = Vfb, and photoemission electron
affinities, all converted to V vs NHE at pH 0; the file states its conventions and the provenance of every
row).  The straight line ``E_CB,measured = slope * E_CB,raw + intercept`` is fitted with scikit-learn.  The
uncertainty of a predicted edge is the root-mean-square of the leave-one-out residuals
(``sklearn.model_selection.LeaveOneOut`` with ``cross_val_predict``): every reference compound predicted by
a line fitted without it.  The VBM is the calibrated CBM plus the gap, so it carries the same sigma: the
measured gaps are known to about 0.1 eV, small against the leave-one-out error, and the regression is on
one edge only, so there is no second, independent residual to draw a separate VBM sigma from.

Rows used
---------
By default only the electrochemical (``flatband``) rows are fitted.  The calibrated edges are compared
with the water redox levels in an electrolyte, and a photoemission energy measured in vacuum lacks the
dipole of the oxide/water interface: in the shipped table the MoO3 film (electron affinity 6.7 eV) lies
about 2 V below every electrochemical estimate.  The photoemission rows stay in the table, and
``fit_calibration(edge_kinds=EDGE_KINDS)`` fits them too (with the 30 rows shipped: Huber loss, one
outlier, leave-one-out RMSE 0.60 V against 0.62 V uncalibrated).  ``screening calibration`` prints every
row and draws the plot.

Choice of regressor
-------------------
Ordinary least squares (``LinearRegression``) unless the data contain outliers that would pull a least
squares line: if any residual of the least-squares fit lies more than 3 robust standard deviations
(1.4826 x median absolute deviation of the residuals) from the median residual, ``HuberRegressor`` (Huber
loss, no L2 penalty) is used instead, because a squared loss lets one or two such points set the slope.
Outliers are only judged from 8 rows up: with fewer, a two-parameter line leaves so few residuals that
their median absolute deviation is no estimate of the scatter (with the 5 flat-band rows shipped earlier
it was 0.04 V against a leave-one-out error of 0.18 V, and would have branded 2 of the 5 rows outliers).  Then the fitted line must
earn its place: if its leave-one-out RMSE is not below the RMSE of the raw estimate itself (slope 1, intercept 0, nothing fitted), the calibration is the identity, with the raw RMSE
as sigma, and ``model`` says so.  The rules are applied to whatever table is shipped; the
:class:`Calibration` records the model and the reason with the numbers.  With the table shipped now the
flat-band rows are 10 (TiO2, SrTiO3, WO3, Fe2O3, BiVO4, Ta2O5, beta-Ga2O3, ZnO, SnO2, Zn2SnO4; most of
them recalled or from secondary pages, see the table), no residual is an outlier, and the fit is least
squares: slope 0.61, intercept +0.07 V, leave-one-out RMSE 0.30 V, MAE 0.27 V (0.35 V uncalibrated).  Ten
points spanning raw CBMs from -1.5 to +0.7 V are a small basis: the sigma is a rough figure, and a slope
this far below 1 pulls hosts outside that range strongly toward the middle.  The vacuum rows of the
wide-gap oxides (HfO2, La2O3, Lu2O3, the scandates, MgO: raw CBM -1.9 to -2.3 V) lie near the 1:1 line,
about 1 V more negative than the fitted line, so for such hosts the calibration is an extrapolation that
the data argue against (README, "Band edges").

All edges here are V vs NHE.  :func:`calibrated_edges` takes raw edges at any pH (0-14), removes the
Nernstian shift (common practice for oxides, -0.0592 V per pH), calibrates at pH 0 and shifts back.
"""
from __future__ import annotations

import hashlib
import json
from dataclasses import asdict, dataclass
from functools import lru_cache
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from screening import bands, formulas, ions
from screening.errors import ScreeningError
from screening.files import atomic_write

REFERENCE_FILE = Path(__file__).with_name("data") / "band_edge_reference.csv"
REQUIRED_COLUMNS = ["formula", "gap_ev", "edge_kind", "edge", "edge_v_nhe_ph0", "conversion",
                    "ph_measured", "source"]
EDGE_KINDS = ("flatband", "photoemission")
EDGES = ("cbm", "vbm")
GAP_RANGE_EV = (0.0, 12.0)
PH_RANGE = (0.0, 14.0)
EDGE_RANGE_V = (-6.0, 6.0)  # vs NHE: beyond this a converted value is surely a conversion mistake
OUTLIER_ROBUST_SIGMAS = 3.0
MIN_ROWS = 4
CALIBRATION_VERSION = "2"
"""Bump when the fitting rules change, so that a calibration cached on disk is refitted."""
MIN_ROWS_FOR_OUTLIERS = 8
FIT_EDGE_KINDS = ("flatband",)


@dataclass(frozen=True)
class Calibration:
    """A fitted calibration of the raw Butler–Ginley CBM.

    ``slope``, ``intercept``: measured = slope * raw + intercept (V vs NHE, pH 0).
    ``loo_rmse_v`` / ``loo_mae_v``: RMSE and mean absolute value of the leave-one-out residuals (V); the
    RMSE is the sigma given to every calibrated edge.
    ``n``: rows used.  ``data_version``: SHA-256 (first 16 hex digits) of the reference file's bytes.
    ``model``: ``"LinearRegression"``, ``"HuberRegressor"`` or ``"identity"`` (no fit beats the raw
    estimate); ``reason``: why.  ``edge_kinds``: the kinds of reference rows fitted.
    ``formulas``, ``raw_cbm_v``, ``measured_cbm_v``, ``loo_cbm_v``: the per-row data, for plots and reports.
    """

    slope: float
    intercept: float
    loo_rmse_v: float
    loo_mae_v: float
    n: int
    data_version: str
    model: str
    reason: str
    edge_kinds: tuple[str, ...]
    formulas: tuple[str, ...]
    raw_cbm_v: tuple[float, ...]
    measured_cbm_v: tuple[float, ...]
    loo_cbm_v: tuple[float, ...]

    def apply(self, cbm_raw_ph0):
        """Calibrated CBM (V vs NHE, pH 0) from raw CBM at pH 0."""
        return self.slope * np.asarray(cbm_raw_ph0, dtype=float) + self.intercept


# --- reference table -----------------------------------------------------------------------------------

def data_version(path: Path = REFERENCE_FILE) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()[:16]


def load_reference(path: Path = REFERENCE_FILE) -> pd.DataFrame:
    """The reference table, validated; raises ScreeningError naming file, row and field."""
    path = Path(path)
    if not path.exists():
        raise ScreeningError("reference table not found", source=str(path))
    table = pd.read_csv(path, comment="#", dtype={"ph_measured": str})
    validate_reference(table, source=str(path))
    return table


def validate_reference(table: pd.DataFrame, *, source: str = "band-edge reference") -> None:
    missing = [c for c in REQUIRED_COLUMNS if c not in table.columns]
    if missing:
        raise ScreeningError(f"missing column(s) {', '.join(missing)}; required: {', '.join(REQUIRED_COLUMNS)}",
                             source=source)
    if len(table) < MIN_ROWS:
        raise ScreeningError(f"{len(table)} rows; a calibration needs at least {MIN_ROWS}", source=source)
    for column, allowed in (("edge_kind", EDGE_KINDS), ("edge", EDGES)):
        bad = ~table[column].isin(allowed)
        if bad.any():
            row = table.index[bad][0]
            raise ScreeningError(f"{table.at[row, column]!r} is not one of {', '.join(allowed)}",
                                 source=source, entry=str(table.at[row, "formula"]), field=column)
    for column, (low, high) in (("gap_ev", GAP_RANGE_EV), ("edge_v_nhe_ph0", EDGE_RANGE_V)):
        values = pd.to_numeric(table[column], errors="coerce").to_numpy(float)
        # a gap of exactly zero is a metal, not a semiconductor: open at the low end for gaps only
        below = values <= low if column == "gap_ev" else values < low
        bad = ~np.isfinite(values) | below | (values > high)
        if bad.any():
            row = table.index[bad][0]
            raise ScreeningError(f"{table.at[row, column]!r} is outside {low}-{high}",
                                 source=source, entry=str(table.at[row, "formula"]), field=column)
    ph = pd.to_numeric(table["ph_measured"].replace("", np.nan), errors="coerce")
    given = table["ph_measured"].notna() & (table["ph_measured"].astype(str).str.strip() != "")
    bad = given & (~np.isfinite(ph) | (ph < PH_RANGE[0]) | (ph > PH_RANGE[1]))
    if bad.any():
        row = table.index[bad][0]
        raise ScreeningError(f"{table.at[row, 'ph_measured']!r} is outside {PH_RANGE[0]:g}-{PH_RANGE[1]:g}",
                             source=source, entry=str(table.at[row, "formula"]), field="ph_measured")
    for column in ("conversion", "source"):
        empty = table[column].isna() | (table[column].astype(str).str.strip() == "")
        if empty.any():
            row = table.index[empty][0]
            raise ScreeningError("empty; every row states its conversion and its published source",
                                 source=source, entry=str(table.at[row, "formula"]), field=column)
    for formula in table["formula"]:
        formulas.parse_formula(formula, source=f"{source}: formula")


def _amount_matrix(formula_list) -> pd.DataFrame:
    rows = [{el: float(n) for el, n in formulas.parse_formula(f).items()} for f in formula_list]
    return pd.DataFrame(rows).fillna(0.0)


def raw_cbm(table: pd.DataFrame) -> np.ndarray:
    """Butler–Ginley CBM (V vs NHE, pH 0) of each row, with the row's measured gap."""
    chi = bands.electronegativity_of_amounts(_amount_matrix(table["formula"]))
    cbm, _ = bands.band_edges(chi, table["gap_ev"].to_numpy(float), ph=0.0)
    return np.atleast_1d(cbm)


def measured_cbm(table: pd.DataFrame) -> np.ndarray:
    """Measured CBM (V vs NHE, pH 0); a measured VBM gives CBM = VBM - gap."""
    value = table["edge_v_nhe_ph0"].to_numpy(float)
    gap = table["gap_ev"].to_numpy(float)
    return np.where(table["edge"].to_numpy() == "vbm", value - gap, value)


# --- fit -------------------------------------------------------------------------------------------------

def _choose_model(x: np.ndarray, y: np.ndarray):
    from sklearn.linear_model import HuberRegressor, LinearRegression

    ols = LinearRegression().fit(x, y)
    if len(y) < MIN_ROWS_FOR_OUTLIERS:
        reason = (f"{len(y)} rows, fewer than {MIN_ROWS_FOR_OUTLIERS}: too few to tell outliers from scatter, "
                  "ordinary least squares")
        return LinearRegression, "LinearRegression", reason
    residual = y - ols.predict(x)
    centre = np.median(residual)
    robust_sigma = 1.4826 * np.median(np.abs(residual - centre))
    scaled = np.abs(residual - centre) / robust_sigma if robust_sigma > 0 else np.zeros_like(residual)
    flagged = np.flatnonzero(scaled > OUTLIER_ROBUST_SIGMAS)
    if flagged.size:
        reason = (f"{flagged.size} of {len(y)} least-squares residuals exceed {OUTLIER_ROBUST_SIGMAS:g} robust "
                  f"sigmas ({robust_sigma:.3f} V, 1.4826 x MAD): rows {', '.join(map(str, flagged))} at "
                  f"{', '.join(f'{s:.1f}' for s in scaled[flagged])} sigma; Huber loss keeps them from setting "
                  f"the slope (least squares would give slope {ols.coef_[0]:.3f}, intercept {ols.intercept_:.3f})")
        return (lambda: HuberRegressor(alpha=0.0, max_iter=2000)), "HuberRegressor", reason
    reason = (f"no least-squares residual beyond {OUTLIER_ROBUST_SIGMAS:g} robust sigmas "
              f"({robust_sigma:.3f} V): ordinary least squares")
    return LinearRegression, "LinearRegression", reason


def fit_calibration(reference: pd.DataFrame | None = None,
                    edge_kinds: tuple[str, ...] = FIT_EDGE_KINDS) -> Calibration:
    """Fit the calibration on the ``edge_kinds`` rows of ``reference`` (default: the shipped table)."""
    from sklearn.model_selection import LeaveOneOut, cross_val_predict

    if reference is None:
        reference = load_reference()
        version = data_version()
    else:
        validate_reference(reference, source="reference frame")
        version = hashlib.sha256(reference.to_csv(index=False).encode()).hexdigest()[:16]
    unknown = sorted(set(edge_kinds) - set(EDGE_KINDS))
    if unknown:
        raise ScreeningError(f"edge kind(s) {', '.join(unknown)} not among {', '.join(EDGE_KINDS)}",
                             field="edge_kinds")
    rows = reference[reference["edge_kind"].isin(edge_kinds)].reset_index(drop=True)
    if len(rows) < MIN_ROWS:
        raise ScreeningError(f"{len(rows)} reference rows of kind {', '.join(edge_kinds)}; "
                             f"a calibration needs at least {MIN_ROWS}", field="edge_kinds")
    x = raw_cbm(rows).reshape(-1, 1)
    y = measured_cbm(rows)
    make_model, name, reason = _choose_model(x, y)
    model = make_model().fit(x, y)
    slope, intercept = float(model.coef_[0]), float(model.intercept_)
    loo = cross_val_predict(make_model(), x, y, cv=LeaveOneOut())
    loo_rmse = float(np.sqrt(np.mean((y - loo) ** 2)))
    raw_rmse = float(np.sqrt(np.mean((y - x[:, 0]) ** 2)))
    if loo_rmse >= raw_rmse:
        reason += (f"; but its leave-one-out RMSE {loo_rmse:.3f} V is not below the raw estimate's RMSE "
                   f"{raw_rmse:.3f} V, so the calibration is the identity")
        name, slope, intercept, loo = "identity", 1.0, 0.0, x[:, 0].copy()
    else:
        reason += f"; leave-one-out RMSE {loo_rmse:.3f} V against {raw_rmse:.3f} V uncalibrated"
    residual = y - loo
    return Calibration(
        slope=slope, intercept=intercept,
        loo_rmse_v=float(np.sqrt(np.mean(residual ** 2))), loo_mae_v=float(np.mean(np.abs(residual))),
        n=int(len(y)), data_version=version, model=name, reason=reason, edge_kinds=tuple(edge_kinds),
        formulas=tuple(rows["formula"].astype(str)), raw_cbm_v=tuple(map(float, x[:, 0])),
        measured_cbm_v=tuple(map(float, y)), loo_cbm_v=tuple(map(float, loo)))


def _cache_file() -> Path:
    key = (f"v{CALIBRATION_VERSION}-{data_version()}-sklearn-{metadata.version('scikit-learn')}-{ions.data_version()}"
           f"-ee{bands.FREE_ELECTRON_EV:g}-{'+'.join(FIT_EDGE_KINDS)}")
    return ions.cache_dir() / "calibration" / f"{key}.json"


@lru_cache(maxsize=1)
def load_calibration() -> Calibration:
    """The calibration on the shipped table: fitted once, kept in memory and on disk under ions.cache_dir()."""
    path = _cache_file()
    if path.exists():
        try:
            stored = json.loads(path.read_text())
            stored = {k: tuple(v) if isinstance(v, list) else v for k, v in stored.items()}
            calibration = Calibration(**stored)
        except (json.JSONDecodeError, TypeError):
            calibration = None  # unreadable or from an older layout: refit below
        if calibration is not None and calibration.data_version == data_version():
            return calibration
    calibration = fit_calibration()
    atomic_write(path, lambda tmp: tmp.write_text(json.dumps(asdict(calibration))))
    return calibration


# --- apply ---------------------------------------------------------------------------------------------

def calibrated_edges(cbm_raw, vbm_raw, gap, ph: float = 0.0, calibration: Calibration | None = None):
    """(cbm, vbm, cbm_sigma, vbm_sigma), V vs NHE at ``ph``, from raw Butler–Ginley edges at ``ph``.

    Vectorised over arrays of equal (broadcastable) shape.  ``vbm_raw - cbm_raw`` must equal ``gap``
    (as :func:`screening.bands.band_edges` gives); the calibrated VBM is the calibrated CBM plus the gap.
    """
    if not np.isscalar(ph) or not np.isfinite(ph) or not PH_RANGE[0] <= float(ph) <= PH_RANGE[1]:
        raise ScreeningError(f"pH {ph!r} is outside {PH_RANGE[0]:g}-{PH_RANGE[1]:g}", field="ph")
    cbm_raw, vbm_raw, gap = np.broadcast_arrays(np.asarray(cbm_raw, dtype=float),
                                                np.asarray(vbm_raw, dtype=float),
                                                np.asarray(gap, dtype=float))
    if not (np.isfinite(cbm_raw).all() and np.isfinite(vbm_raw).all()):
        raise ScreeningError("raw band edges must be finite numbers", field="cbm_raw/vbm_raw")
    bad_gap = ~np.isfinite(gap) | (gap <= GAP_RANGE_EV[0]) | (gap > GAP_RANGE_EV[1])
    if bad_gap.any():
        raise ScreeningError(f"gap {gap[bad_gap].flat[0]!r} eV is outside {GAP_RANGE_EV[0]:g}-{GAP_RANGE_EV[1]:g}",
                             field="gap")
    mismatch = np.abs(vbm_raw - cbm_raw - gap) > 1e-6
    if mismatch.any():
        raise ScreeningError("vbm_raw - cbm_raw differs from gap; pass the edges band_edges() gives",
                             field="vbm_raw")
    cal = calibration if calibration is not None else load_calibration()
    shift = bands.NERNST_SLOPE_V * float(ph)
    cbm = cal.apply(cbm_raw + shift) - shift
    vbm = cbm + gap
    sigma = np.full(cbm.shape, cal.loo_rmse_v)
    if cbm.ndim == 0:
        return float(cbm), float(vbm), float(sigma), float(sigma)
    return cbm, vbm, sigma, sigma.copy()
