"""Oxidation-state plausibility: keep ions in states that are common for the element.

'Common' is mendeleev's ``oxidationstates`` category ``main`` (its table follows
Greenwood & Earnshaw's list of common states; see mendeleev's documentation).
"""
from __future__ import annotations

import pandas as pd

from screening.filters import rejected_ions

RULE = "oxidation_state"


def apply(placements: pd.DataFrame, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    if not thresholds["common_only"]:
        return placements, rejected_ions(placements, placements.index < 0, RULE, None, None, "")
    bad = ~placements["common"].astype(bool).to_numpy()
    def detail(rows):
        chosen = placements.iloc[rows]
        return chosen["ion"] + " is not a common oxidation state of " + chosen["element"] + " (mendeleev)"

    return placements[~bad], rejected_ions(placements, bad, RULE, placements["charge"], None, detail)
