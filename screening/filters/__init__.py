"""Screening rules, one module a rule.

Each rule takes a frame (placements of single ions, or whole candidates) and
its thresholds from the rule set, and returns ``(kept, rejected)``.  The
rejected frame has the columns of :data:`REJECTED_COLUMNS`: which candidate,
the rule, the value that failed, the threshold and a sentence saying why.
Rows whose ``scope`` is ``ion`` stand for every candidate that would use that
ion on that site: single-ion rules run before pairs are built, so those
candidates are never materialised.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

REJECTED_COLUMNS = ["host", "dopant", "dopant_site", "codopant", "codopant_site", "rule", "value",
                    "threshold", "scope", "detail"]


def rejected_ions(placements: pd.DataFrame, mask, rule: str, value, threshold, detail) -> pd.DataFrame:
    """Rejection rows for single-ion placements (scope 'ion')."""
    chosen = placements[mask]
    n = len(chosen)
    return pd.DataFrame({
        "host": chosen["host"].to_numpy(), "dopant": chosen["ion"].to_numpy(), "dopant_site": chosen["site"].to_numpy(),
        "codopant": np.full(n, "", dtype=object), "codopant_site": np.full(n, "", dtype=object),
        "rule": np.full(n, rule, dtype=object),
        "value": _values(value, mask, n), "threshold": _values(threshold, mask, n),
        "scope": np.full(n, "ion", dtype=object), "detail": _texts(detail, mask, n),
    })


def rejected_candidates(candidates: pd.DataFrame, mask, rule: str, value, threshold, detail) -> pd.DataFrame:
    chosen = candidates[mask]
    n = len(chosen)
    return pd.DataFrame({
        "host": chosen["host"].to_numpy(), "dopant": chosen["dopant_ion"].to_numpy(),
        "dopant_site": chosen["dopant_site"].to_numpy(), "codopant": chosen["codopant_ion"].to_numpy(),
        "codopant_site": chosen["codopant_site"].to_numpy(), "rule": np.full(n, rule, dtype=object),
        "value": _values(value, mask, n), "threshold": _values(threshold, mask, n),
        "scope": np.full(n, "candidate", dtype=object), "detail": _texts(detail, mask, n),
        "candidate_id": chosen["candidate_id"].to_numpy(),
    })


def _values(value, mask, n):
    if np.isscalar(value) or value is None:
        return np.full(n, np.nan if value is None else float(value))
    return np.asarray(value, dtype=float)[np.asarray(mask)]


def _texts(detail, mask, n):
    """``detail``: one sentence, one per row of the frame, or a function of the rejected rows' positions.

    A function is called only with the positions that are rejected, so the sentences (formatted
    numbers: Python per row) are built for the rejected rows, not for every candidate.
    """
    if isinstance(detail, str):
        return np.full(n, detail, dtype=object)
    if callable(detail):
        texts = detail(np.flatnonzero(np.asarray(mask)))
        # a pandas result converts in one step; list() would walk its arrow strings one by one
        texts = texts.to_numpy(dtype=object) if isinstance(texts, (pd.Series, pd.Index)) else list(texts)
        return np.asarray(texts, dtype=object).reshape(n)
    return np.asarray(detail, dtype=object)[np.asarray(mask)]


def empty_rejected() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=float if c in ("value", "threshold") else object)
                         for c in REJECTED_COLUMNS + ["candidate_id"]})
