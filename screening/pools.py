"""Dopant pools: which elements a screen tries on the host's cation sites.

A pool file lists element symbols; every positive oxidation state that
mendeleev lists for an element enters the enumeration, and the
oxidation-state rule of the rule set then decides which are plausible, so
that a rejected state is recorded rather than never tried.
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd
import yaml

from screening import ions
from screening.errors import ScreeningError

_POOL_FIELDS = {"name", "description", "elements", "source"}


def load_pool(path: str | Path) -> list[str]:
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError("dopant pool file not found", source=source)
    try:
        document = yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.YAMLError as exc:
        raise ScreeningError(f"not valid YAML: {getattr(exc, 'problem', exc)}", source=source) from None
    if not isinstance(document, dict):
        raise ScreeningError("a dopant pool must be a YAML mapping with 'elements'", source=source)
    unknown = set(document) - _POOL_FIELDS
    if unknown:
        raise ScreeningError(f"unknown key(s) {', '.join(sorted(map(str, unknown)))}; allowed: "
                             + ", ".join(sorted(_POOL_FIELDS)), source=source)
    elements = document.get("elements")
    if not isinstance(elements, list) or not elements:
        raise ScreeningError("must be a non-empty list of element symbols", source=source, field="elements")
    known = ions.load_ion_data().elements.index
    for i, symbol in enumerate(elements):
        if not isinstance(symbol, str) or symbol not in known:
            raise ScreeningError(f"unknown element {symbol!r}", source=source, field=f"elements[{i}]")
    if len(set(elements)) != len(elements):
        repeated = sorted({s for s in elements if elements.count(s) > 1})
        raise ScreeningError(f"repeated element(s) {', '.join(repeated)}", source=source, field="elements")
    return list(elements)


def pool_ions(elements: list[str]) -> pd.DataFrame:
    """element, charge, common: every positive oxidation state of the pool's elements."""
    states = ions.load_ion_data().states
    chosen = states[states["element"].isin(elements) & (states["charge"] > 0)]
    return chosen.sort_values(["element", "charge"]).reset_index(drop=True)
