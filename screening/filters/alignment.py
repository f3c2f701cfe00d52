"""Band-edge alignment with the water redox levels plus overpotential margins, as a probability.

Overall water splitting on one absorber needs the CBM above H+/H2 by the
hydrogen-evolution overpotential and the highest occupied level (the VBM, or
an occupied dopant level in the gap) below O2/H2O by the oxygen-evolution
overpotential (defaults 0.1 V and 0.4 V: typical overpotentials on good
catalysts, common practice).  In a two-absorber (Z-scheme) system a hydrogen-
or oxygen-evolving photocatalyst needs only its own half-reaction; the rule
set's ``mode`` says which.

The edges carry Gaussian errors (sigma from the leave-one-out residuals of the
calibration, :mod:`screening.calibration`); the probability that the true
edges meet the conditions is :func:`screening.bands.alignment_probability`.
A candidate is rejected when that probability is below ``min_probability``.
The default 0.5 is the old margin rule for one half-reaction (P >= 0.5 exactly
when the estimated margin is >= 0); for overall splitting it is stricter,
because the two conditions must hold together.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening.errors import ScreeningError
from screening.filters import rejected_candidates

RULE = "alignment"
MODES = ("overall", "hydrogen", "oxygen")


def apply(frame: pd.DataFrame, alignment: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    mode = alignment["mode"]
    if mode not in MODES:
        raise ScreeningError(f"{mode!r} is not one of {', '.join(MODES)}", field="alignment.mode")
    threshold = float(alignment["min_probability"])
    if not 0.0 <= threshold <= 1.0:
        raise ScreeningError(f"{threshold!r} is outside 0-1", field="alignment.min_probability")
    probability = frame["alignment_probability"].to_numpy(float)
    bad = probability < threshold if alignment["required"] else np.zeros(len(frame), dtype=bool)
    her = frame["her_margin_v"].to_numpy(float)
    oer = frame["oer_margin_v"].to_numpy(float)
    # name the condition that fails (or the weaker one): the smaller margin in sigma units
    cbm_worse = {"overall": her <= oer, "hydrogen": np.ones(len(frame), bool),
                 "oxygen": np.zeros(len(frame), bool)}[mode]
    sigma = frame["cbm_sigma_v"].to_numpy(float)

    def detail(rows):
        return [f"P(aligned) {p:.3f} < {threshold:g} ({mode}): "
                + (f"CBM margin above H+/H2 + {alignment['her_overpotential_v']:g} V {h:+.3f} V" if worse
                   else f"occupied-level margin below O2/H2O + {alignment['oer_overpotential_v']:g} V {o:+.3f} V")
                + f" (sigma {s:.2f} V)"
                for p, h, o, s, worse in zip(probability[rows], her[rows], oer[rows], sigma[rows], cbm_worse[rows])]
    return frame[~bad], rejected_candidates(frame, bad, RULE, probability, threshold, detail)
