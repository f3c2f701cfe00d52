"""Dopant pools: which elements a screen tries on the host's cation sites.

A pool file lists element symbols; every positive oxidation state that
mendeleev lists for an element enters the enumeration, and the
oxidation-state rule of the rule set then decides which are plausible, so
that a rejected state is recorded rather than never tried.
"""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from screening import ions
from screening.errors import ScreeningError

_POOL_FIELDS = {"name", "description", "elements", "source"}


def load_pool(path: str | Path) -> list[str]:
    """Element symbols of a pool file; raises ScreeningError naming the file and field on any problem."""
    from screening.hosts import read_yaml  # one YAML reader (safe, no repeated keys) for every input file

    path = Path(path)
    source = str(path)
    document = read_yaml(path, "dopant pool")
    if not isinstance(document, dict):
        raise ScreeningError("a dopant pool must be a YAML mapping with 'elements'", source=source)
    unknown = set(document) - _POOL_FIELDS
    if unknown:
        raise ScreeningError(f"unknown key(s) {', '.join(sorted(map(repr, unknown)))}; allowed: "
                             + ", ".join(sorted(_POOL_FIELDS)), source=source)
    for key in ("name", "description", "source"):
        if key in document and not isinstance(document[key], str):
            raise ScreeningError(f"must be text, got {type(document[key]).__name__} {document[key]!r}",
                                 source=source, field=key)
    elements = document.get("elements")
    if not isinstance(elements, list) or not elements:
        raise ScreeningError("must be a non-empty list of element symbols", source=source, field="elements")
    data = ions.load_ion_data()
    with_states = set(data.states["element"])
    for i, symbol in enumerate(elements):
        if isinstance(symbol, bool):
            # YAML 1.1 reads an unquoted No (nobelium), NO, yes, on, off as a boolean
            raise ScreeningError(f"got the boolean {symbol!r}: YAML reads unquoted No/yes/on/off as true/false; "
                                 "quote the symbol", source=source, field=f"elements[{i}]")
        if not isinstance(symbol, str) or symbol not in data.elements.index:
            raise ScreeningError(f"unknown element {symbol!r}", source=source, field=f"elements[{i}]")
        if symbol not in with_states:
            # it could never form an ion, so it would add nothing to the screen without a word
            raise ScreeningError(f"{symbol} has no oxidation state in mendeleev's table; it cannot be a dopant",
                                 source=source, field=f"elements[{i}]")
    if len(set(elements)) != len(elements):
        repeated = sorted({s for s in elements if elements.count(s) > 1})
        raise ScreeningError(f"repeated element(s) {', '.join(repeated)}", source=source, field="elements")
    return list(elements)


def pool_ions(elements: list[str]) -> pd.DataFrame:
    """element, charge, common: every positive oxidation state of the pool's elements."""
    states = ions.load_ion_data().states
    chosen = states[states["element"].isin(elements) & (states["charge"] > 0)]
    return chosen.sort_values(["element", "charge"]).reset_index(drop=True)
