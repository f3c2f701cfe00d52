"""Charge balance of a candidate, in exact integer arithmetic.

A candidate is kept when its defects are neutral as a set (Kröger–Vink
bookkeeping): an isovalent single; an acceptor with oxygen vacancies where the
rule set allows it; a donor with electrons where it allows it; or an
acceptor–donor pair in their smallest integer ratio, provided neither count
exceeds the rule set's ``max_ratio``.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening.enumerate import net_charge
from screening.filters import rejected_candidates

RULE = "charge_balance"


def apply(candidates: pd.DataFrame, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    max_ratio = int(thresholds["max_ratio"])
    uncompensated = candidates["compensation"].eq("none").to_numpy()
    too_many = candidates["max_ratio_count"].to_numpy() > max_ratio
    bad = uncompensated | too_many
    value = np.where(uncompensated, candidates["dopant_delta"], candidates["max_ratio_count"])
    threshold = np.where(uncompensated, 0, max_ratio)
    def detail(rows):
        delta = candidates["dopant_delta"].to_numpy()[rows]
        ratio = candidates["ratio"].to_numpy()[rows]
        return [f"uncompensated effective charge {d:+d} (no compensation allowed by the rule set)" if none
                else f"ratio {r} needs more than {max_ratio} ions of one kind"
                for d, r, none in zip(delta, ratio, uncompensated[rows])]
    kept = candidates[~bad]
    # an invariant of the enumeration, not a user-facing rule: fail loudly if broken
    residual = net_charge(kept)
    if np.any(residual != 0):
        raise AssertionError("enumeration produced a non-neutral kept candidate: "
                             + ", ".join(kept.loc[residual != 0, "candidate_id"].head(5)))
    return kept, rejected_candidates(candidates, bad, RULE, value, threshold, detail)
