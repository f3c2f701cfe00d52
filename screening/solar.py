"""Theoretical solar-to-hydrogen (STH) efficiency limit from an absorption onset.

Method: the photon-counting limit used throughout the water-splitting
literature (e.g. Walter et al., "Solar Water Splitting Cells", Chem. Rev. 110
(2010) 6446; Chen et al., J. Mater. Res. 25 (2010) 3 on PEC reporting
standards -- both from memory).  No detailed balance, no overpotentials, no
reflection: every photon of the reference spectrum with energy above the gap
yields one electron (unit quantum yield), so

    J_max(Eg) = q * integral_{280 nm}^{hc/Eg} phi(lambda) dlambda,
    phi(lambda) = E_lambda(lambda) * lambda / (h c),

    STH(Eg)   = J_max(Eg) * 1.23 V / (1000 W m^-2).

1.23 V is the free energy of water splitting per electron
(237.1 kJ mol^-1 / 2F, common practice).  The spectrum is ASTM G173-03 AM1.5
global tilt (37 deg), shipped as ``data/astm_g173_global.csv`` (a copy of
pymatgen's ``analysis/solar/am1.5G.dat``).  Its trapezoid integral is about
1000.37 W m^-2; the conventional normalisation of 1000 W m^-2 is used for the
incident power, as in the literature.

The cumulative photon flux is tabulated once on the spectrum's own wavelength
grid (trapezoid rule, cumulative from the short-wavelength end) and then
evaluated for any number of gaps with a single ``np.interp`` in photon energy.

Range: the table spans 280-4000 nm, i.e. 4.43-0.31 eV.  Gaps above 4.43 eV give
exactly 0; gaps below 0.31 eV saturate at the photon flux of the whole table.
A few irradiance values near 2.7 um are zero in G173, so J_max is flat (not
strictly decreasing) in small windows around 0.46 eV; it is strictly
decreasing over the visible/near-IR range relevant to photocatalysts.
"""

from __future__ import annotations

from functools import lru_cache
from importlib import resources

import numpy as np
import pandas as pd
from scipy.constants import c as SPEED_OF_LIGHT  # m s^-1, exact
from scipy.constants import e as ELEMENTARY_CHARGE  # C, exact (CODATA 2018)
from scipy.constants import h as PLANCK  # J s, exact (CODATA 2018)

from screening.errors import ScreeningError

SPECTRUM_FILE = "astm_g173_global.csv"

#: Water-splitting free energy per electron, V (237.1 kJ/mol / 2F, common practice).
WATER_SPLITTING_POTENTIAL_V = 1.23
#: Conventional AM1.5G incident power, W m^-2 (G173 integrates to ~1000.37).
INCIDENT_POWER_W_M2 = 1000.0

# hc/q in eV nm: converts between photon energy (eV) and wavelength (nm).
_HC_EV_NM = PLANCK * SPEED_OF_LIGHT / ELEMENTARY_CHARGE * 1e9
# A m^-2 -> mA cm^-2
_A_M2_TO_MA_CM2 = 1e3 / 1e4


@lru_cache(maxsize=1)
def am15g_spectrum() -> tuple[np.ndarray, np.ndarray]:
    """Return (wavelength_nm, irradiance_w_m2_nm) of the shipped G173 global spectrum."""
    path = resources.files("screening").joinpath("data", SPECTRUM_FILE)
    with resources.as_file(path) as p:
        table = pd.read_csv(p, comment="#")
    expected = ["wavelength_nm", "irradiance_w_m2_nm"]
    if list(table.columns) != expected:
        raise ScreeningError(f"columns must be {expected}, found {list(table.columns)}",
                             source=str(path))
    wl = table["wavelength_nm"].to_numpy(dtype=float)
    irr = table["irradiance_w_m2_nm"].to_numpy(dtype=float)
    # The cumulative integral below assumes an ascending grid and a physical spectrum.
    if not np.all(np.diff(wl) > 0):
        raise ScreeningError("wavelengths must be strictly increasing", source=str(path),
                             field="wavelength_nm")
    if not np.all(np.isfinite(irr)) or np.any(irr < 0):
        raise ScreeningError("irradiance must be finite and >= 0", source=str(path),
                             field="irradiance_w_m2_nm")
    wl.setflags(write=False)
    irr.setflags(write=False)
    return wl, irr


@lru_cache(maxsize=1)
def _cumulative_flux_by_energy() -> tuple[np.ndarray, np.ndarray]:
    """Photon flux above each tabulated photon energy, in photons m^-2 s^-1.

    Returned with energy ascending (as ``np.interp`` requires), so the flux
    column is descending: at the top energy (280 nm) it is 0, at the bottom
    (4000 nm) it is the flux of the whole table.
    """
    wl, irr = am15g_spectrum()
    # Spectral photon flux, photons m^-2 s^-1 nm^-1: E_lambda / (hc / lambda).
    phi = irr * (wl * 1e-9) / (PLANCK * SPEED_OF_LIGHT)
    steps = 0.5 * (phi[1:] + phi[:-1]) * np.diff(wl)
    cumulative = np.concatenate(([0.0], np.cumsum(steps)))
    energy = _HC_EV_NM / wl
    return energy[::-1].copy(), cumulative[::-1].copy()


def _validated_gaps(gap_ev) -> np.ndarray:
    try:
        gaps = np.asarray(gap_ev, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ScreeningError(f"must be numeric, got {gap_ev!r}", field="gap_ev") from exc
    bad = ~np.isfinite(gaps) | (gaps <= 0)
    if np.any(bad):
        shown = gaps[bad].ravel()[:5].tolist()
        raise ScreeningError(
            f"band gap must be a finite number > 0 eV; got {shown}"
            + (f" (and {int(bad.sum()) - 5} more)" if bad.sum() > 5 else ""),
            field="gap_ev")
    return gaps


def _as_output(values: np.ndarray, gap_ev):
    return float(values) if np.ndim(gap_ev) == 0 else values


def photocurrent_limit_ma_cm2(gap_ev):
    """Maximum photocurrent density (mA cm^-2) under AM1.5G for absorption onset ``gap_ev`` (eV).

    Vectorised: array-like in, array of the same shape out; scalar in, float out.
    Raises :class:`ScreeningError` for gaps that are <= 0, NaN or infinite.
    """
    gaps = _validated_gaps(gap_ev)
    energy, flux = _cumulative_flux_by_energy()
    # right=0: photons above 4.43 eV are absent from the table; left=total: gaps
    # below 0.31 eV absorb the whole tabulated spectrum.
    photons = np.interp(gaps, energy, flux, left=flux[0], right=0.0)
    return _as_output(ELEMENTARY_CHARGE * photons * _A_M2_TO_MA_CM2, gap_ev)


def sth_limit(gap_ev):
    """Theoretical STH efficiency (fraction, e.g. 0.18) for absorption onset ``gap_ev`` (eV).

    STH = J_max * 1.23 V / 1000 W m^-2, with J_max from
    :func:`photocurrent_limit_ma_cm2`.  Same vectorisation and validation.
    """
    j_a_m2 = np.asarray(photocurrent_limit_ma_cm2(gap_ev)) / _A_M2_TO_MA_CM2
    return _as_output(j_a_m2 * WATER_SPLITTING_POTENTIAL_V / INCIDENT_POWER_W_M2, gap_ev)
