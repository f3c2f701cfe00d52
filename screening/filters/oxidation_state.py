"""Oxidation-state plausibility: keep ions in states that are common for the element.

'Common' is mendeleev's ``oxidationstates`` category ``main`` (its table follows
Greenwood & Earnshaw's list of common states; see mendeleev's documentation).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening.filters import rejected_ions

RULE = "oxidation_state"


def apply(placements: pd.DataFrame, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    if not thresholds["common_only"]:
        return placements, rejected_ions(placements, placements.index < 0, RULE, None, None, "")
    bad = ~placements["common"].astype(bool).to_numpy()
    def detail(rows):
        # one sentence per distinct ion (a pool has a few hundred; a shard rejects tens of thousands of placements)
        codes, ions = pd.factorize(placements["ion"].iloc[rows])
        elements = placements["element"].iloc[rows].to_numpy(object)
        first = np.unique(codes, return_index=True)[1]
        sentences = np.asarray(ions, dtype=object) + " is not a common oxidation state of " + elements[first] + " (mendeleev)"
        return sentences[codes]

    return placements[~bad], rejected_ions(placements, bad, RULE, placements["charge"], None, detail)
