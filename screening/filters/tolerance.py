"""Perovskite formability of whole doped compositions: Goldschmidt t and Bartel tau.

Goldschmidt, Naturwissenschaften 14 (1926) 477; Bartel et al., Sci. Adv. 5 (2019)
eaav0693 (tau < 4.18 predicts a perovskite).  Both from site-averaged Shannon
radii (see :mod:`screening.perovskite`), for candidates on ABO3 hosts of the
rule set's ``filters.lattice.apply_to_families``; other hosts pass untouched
(their t and tau are NaN).  A NaN tau on a host the rule applies to (r_A <= r_B)
is a rejection, never a pass.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening import perovskite
from screening.filters import rejected_candidates

RULE = "tolerance"


def apply(candidates: pd.DataFrame, hosts: dict, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Returns (kept with goldschmidt_t and bartel_tau columns, rejected)."""
    if candidates.empty:
        # an earlier rule removed everything: nothing to check, same columns
        kept = candidates.assign(goldschmidt_t=pd.Series(dtype=float), bartel_tau=pd.Series(dtype=float))
        return kept, rejected_candidates(kept, np.zeros(0, dtype=bool), RULE, None, None, "")
    factors = perovskite.site_averaged(candidates, hosts, thresholds["apply_to_families"])
    candidates = candidates.assign(goldschmidt_t=factors["goldschmidt_t"].to_numpy(),
                                   bartel_tau=factors["bartel_tau"].to_numpy())
    applies = factors["applies"].to_numpy(bool)
    t = factors["goldschmidt_t"].to_numpy(float)
    tau = factors["bartel_tau"].to_numpy(float)
    low, high = thresholds["tolerance"]["min"], thresholds["tolerance"]["max"]
    tau_max = thresholds["tau_max"]
    # a null threshold switches that check off; comparisons with NaN reject (never pass)
    too_low = applies & ~(t >= low) if low is not None else np.zeros(len(t), bool)
    too_high = applies & ~(t <= high) & ~too_low if high is not None else np.zeros(len(t), bool)
    tau_bad = applies & ~(tau < tau_max) & ~too_low & ~too_high if tau_max is not None else np.zeros(len(t), bool)
    bad = too_low | too_high | tau_bad
    value = np.where(too_low | too_high, t, tau)
    threshold = np.select([too_low, too_high], [np.nan if low is None else low, np.nan if high is None else high],
                          default=np.nan if tau_max is None else tau_max)
    def detail(rows):
        # sentences for the rejected rows only (a Python format per row)
        return [f"Goldschmidt t {t[i]:.3f} < {low}" if too_low[i]
                else f"Goldschmidt t {t[i]:.3f} > {high}" if too_high[i]
                else f"Bartel tau {tau[i]:.2f} >= {tau_max} (not predicted a perovskite)" for i in rows]

    return candidates[~bad], rejected_candidates(candidates, bad, RULE, value, threshold, detail)
