"""Band edges from electronegativity (Butler–Ginley) and alignment with the water redox levels.

Method
------
Butler & Ginley, J. Electrochem. Soc. 125 (1978) 228, after Nethercot,
Phys. Rev. Lett. 33 (1974) 1088: the electronegativity of a compound is the
geometric mean of its atoms' Mulliken electronegativities,
chi = (prod chi_i ** n_i) ** (1 / N), and the conduction-band edge on the NHE
scale at pH 0 (point of zero charge taken at pH 0) is

    E_CB = chi - E_e - Eg / 2,    E_VB = E_CB + Eg.

E_e, the energy of a free electron on the hydrogen scale, is taken as 4.5 eV
everywhere in this project, as in the band-edge tables of Xu & Schoonen,
Am. Mineral. 85 (2000) 543 that the tests compare with.  (The IUPAC value is
4.44 eV, Trasatti, Pure Appl. Chem. 58 (1986) 955; using it would move every
edge by +0.06 V.)

Oxide band edges follow the Nernstian shift of -0.0592 V per pH unit (common
practice), as do the water redox levels, so alignment on the RHE scale does not
depend on pH; potentials are reported vs NHE at the rule set's pH.

:func:`alignment_probability` turns the margins into the probability that the true edges clear them,
for Gaussian edge errors (the calibration's leave-one-out sigma); its docstring derives the joint
probability when one error moves both edges (VBM = CBM + gap).
"""
from __future__ import annotations

from collections.abc import Mapping
from fractions import Fraction

import numpy as np
import pandas as pd

from screening import ions

FREE_ELECTRON_EV = 4.5
"""Energy of the free electron on the NHE scale used throughout (Butler–Ginley literature value)."""
NERNST_SLOPE_V = 0.0592
"""RT ln(10) / F at 25 °C, volts per pH unit."""
HYDROGEN_EVOLUTION_V = 0.0
"""H+/H2 vs NHE at pH 0."""
OXYGEN_EVOLUTION_V = 1.229
"""O2/H2O vs NHE at pH 0 and 25 °C."""


def water_levels(ph: float) -> tuple[float, float]:
    """(H+/H2, O2/H2O) in V vs NHE at ``ph``."""
    shift = -NERNST_SLOPE_V * ph
    return HYDROGEN_EVOLUTION_V + shift, OXYGEN_EVOLUTION_V + shift


def electronegativity(composition: Mapping[str, float | Fraction]) -> float:
    """Butler–Ginley compound electronegativity (eV) of one composition."""
    table = ions.load_ion_data().elements
    symbols = list(composition)
    ions.require_element_values(symbols, ["chi_mulliken_ev"], context="electronegativity")
    amounts = np.array([float(composition[s]) for s in symbols])
    chi = table.loc[symbols, "chi_mulliken_ev"].to_numpy(float)
    return float(np.exp(np.sum(amounts * np.log(chi)) / amounts.sum()))


def electronegativity_of_amounts(amounts: pd.DataFrame) -> np.ndarray:
    """Vectorised: one compound electronegativity per row of an element-amount matrix.

    ``amounts`` has one column per element symbol and one row per composition.
    """
    symbols = list(amounts.columns)
    ions.require_element_values(symbols, ["chi_mulliken_ev"], context="electronegativity")
    log_chi = np.log(ions.load_ion_data().elements.loc[symbols, "chi_mulliken_ev"].to_numpy(float))
    matrix = amounts.to_numpy(float)
    return np.exp(matrix @ log_chi / matrix.sum(axis=1))


def band_edges(chi_ev, gap_ev, ph: float = 0.0):
    """(CBM, VBM) in V vs NHE at ``ph`` from compound electronegativity and gap (arrays or floats)."""
    chi = np.asarray(chi_ev, dtype=float)
    gap = np.asarray(gap_ev, dtype=float)
    cbm = chi - FREE_ELECTRON_EV - gap / 2.0 - NERNST_SLOPE_V * ph
    vbm = cbm + gap
    if cbm.ndim == 0:
        return float(cbm), float(vbm)
    return cbm, vbm


def alignment_margins(cbm_v, vbm_v, ph: float, her_overpotential_v: float, oer_overpotential_v: float):
    """Margins (V) by which the edges clear the water levels plus overpotentials.

    Positive ``her_margin`` means the CBM lies above (more negative than) H+/H2 by
    more than the hydrogen-evolution overpotential; positive ``oer_margin`` means
    the VBM lies below (more positive than) O2/H2O by more than the
    oxygen-evolution overpotential.
    """
    hydrogen, oxygen = water_levels(ph)
    her_margin = (hydrogen - her_overpotential_v) - np.asarray(cbm_v, dtype=float)
    oer_margin = np.asarray(vbm_v, dtype=float) - (oxygen + oer_overpotential_v)
    return her_margin, oer_margin


def alignment_probability(her_margin_v, oer_margin_v, cbm_sigma_v, occupied_sigma_v, shared_error,
                          mode: str = "overall"):
    """Probability that the true edges clear the water levels plus overpotentials.

    Model: the true CBM is the estimate plus an error e_c ~ N(0, cbm_sigma^2); the true highest occupied
    level (VBM or dopant level) is its estimate plus e_o ~ N(0, occupied_sigma^2).  Hydrogen evolution
    needs e_c < her_margin, oxygen evolution e_o > -oer_margin (margins as :func:`alignment_margins` gives,
    with the occupied level in place of the VBM).

    * ``shared_error`` true (the occupied level is the VBM = CBM + gap, or a dopant level measured in this
      composition, placed at a fixed depth below the CBM): e_o = e_c, one error moves both, and
      P = P(-oer_margin < e < her_margin) = max(0, Phi(her/s) + Phi(oer/s) - 1).
      Multiplying the two marginals instead would be wrong: with one shared error the two events pull in
      opposite directions (an error that moves both edges up in energy helps hydrogen and hurts oxygen),
      they are negatively dependent, and the product overstates P (Phi(a) + Phi(b) - 1 <= Phi(a) Phi(b)).
    * ``shared_error`` false (a level transferred from other hosts, whose error is that of the reference
      host's edges, independent of this host's): P = Phi(her/s_c) * Phi(oer/s_o).

    ``mode`` hydrogen or oxygen (one absorber of a two-absorber scheme): only that marginal.
    Vectorised over arrays; sigmas must be > 0.
    """
    from scipy.special import ndtr

    her = np.asarray(her_margin_v, dtype=float)
    oer = np.asarray(oer_margin_v, dtype=float)
    s_c = np.asarray(cbm_sigma_v, dtype=float)
    s_o = np.asarray(occupied_sigma_v, dtype=float)
    if np.any(~np.isfinite(s_c) | (s_c <= 0)) or np.any(~np.isfinite(s_o) | (s_o <= 0)):
        raise ValueError("edge uncertainties must be finite and > 0")
    p_her = ndtr(her / s_c)
    if mode == "hydrogen":
        return p_her
    shared = np.asarray(shared_error, dtype=bool)
    # with one shared error the oxygen condition is on the same e, so its sigma is the CBM's
    p_oer = ndtr(oer / np.where(shared, s_c, s_o))
    if mode == "oxygen":
        return p_oer
    if mode != "overall":
        raise ValueError(f"alignment mode {mode!r} is not one of overall, hydrogen, oxygen")
    return np.where(shared, np.clip(p_her + p_oer - 1.0, 0.0, 1.0), p_her * p_oer)
