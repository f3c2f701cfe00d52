"""Band-edge alignment with the water redox levels plus overpotential margins.

Overall water splitting on one absorber needs the CBM above H+/H2 by the
hydrogen-evolution overpotential and the VBM below O2/H2O by the
oxygen-evolution overpotential (defaults 0.1 V and 0.4 V: typical
overpotentials on good catalysts, common practice).  In a two-absorber
(Z-scheme) system a hydrogen- or oxygen-evolving photocatalyst needs only its
own half-reaction; the rule set's ``mode`` says which.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening.filters import rejected_candidates

RULE = "alignment"


def apply(frame: pd.DataFrame, alignment: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    margin = frame["alignment_margin_v"].to_numpy(float)
    bad = margin < 0 if alignment["required"] else np.zeros(len(frame), dtype=bool)
    her = frame["her_margin_v"].to_numpy(float)
    which = np.where(her <= frame["oer_margin_v"].to_numpy(float), "CBM misses H+/H2 + ", "VBM misses O2/H2O + ")
    if alignment["mode"] == "hydrogen":
        which[:] = "CBM misses H+/H2 + "
    elif alignment["mode"] == "oxygen":
        which[:] = "VBM misses O2/H2O + "
    detail = (pd.Series(which, index=frame.index)
              + np.where(np.char.startswith(which.astype(str), "CBM"),
                         f"{alignment['her_overpotential_v']:g} V", f"{alignment['oer_overpotential_v']:g} V")
              + " by " + pd.Series(-margin, index=frame.index).map(lambda v: f"{v:.3f}") + " V")
    return frame[~bad], rejected_candidates(frame, bad, RULE, margin, 0.0, detail)
