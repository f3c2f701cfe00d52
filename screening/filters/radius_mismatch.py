"""Ionic-radius mismatch at the site's coordination.

Relative difference of Shannon effective ionic radii (Shannon, Acta Cryst.
A32 (1976) 751) of dopant and host ion at the host site's coordination number,
|r - r_site| / r_site.  The default ceiling of 0.15 is the 15 % size rule for
substitutional solid solutions (Hume-Rothery, carried over to ionic
substitution; common practice).  An ion with no radius at that coordination,
and too few tabulated coordinations to estimate one, is rejected with that
reason: a missing radius is never a pass.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening import ions
from screening.filters import rejected_ions

RULE = "radius_mismatch"


def apply(placements: pd.DataFrame, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    limit = float(thresholds["max_relative"])
    no_radius = placements["radius_a"].isna().to_numpy()
    estimated_refused = (~no_radius) & placements["radius_estimated"].to_numpy() & (not thresholds["allow_estimated"])
    too_far = (~no_radius) & (placements["mismatch"].to_numpy() > limit)
    bad = no_radius | estimated_refused | too_far

    def detail(rows):
        # sentences for the rejected rows only: building all three for every placement was most of this rule
        chosen = placements.iloc[rows]
        cn = chosen["coordination"].to_numpy(np.int64)
        distinct = np.unique(cn)
        cn_code = pd.Series(np.array([ions.int_to_roman(int(c)) for c in distinct], dtype=object)[
            np.searchsorted(distinct, cn)], index=chosen.index, dtype="str")
        return np.select(
            [no_radius[rows], estimated_refused[rows]],
            ["no Shannon radius for " + chosen["ion"] + " at coordination " + cn_code
             + " and too few tabulated coordinations to estimate one",
             "radius of " + chosen["ion"] + " at coordination " + cn_code
             + " is only estimated and the rule set refuses estimates"],
            default=("radius mismatch " + chosen["mismatch"].round(3).astype(str) + " > " + str(limit)
                     + " (" + chosen["ion"] + " " + chosen["radius_a"].round(3).astype(str) + " Å vs "
                     + chosen["site"] + " " + chosen["site_radius_a"].round(3).astype(str) + " Å)"))

    return placements[~bad], rejected_ions(placements, bad, RULE, placements["mismatch"], limit, detail)
