"""Parsing chemical formulas typed by people, with exact amounts.

Accepts plain ASCII formulas with optional decimal or integer amounts and one
level or more of parentheses: ``SrTiO3``, ``Sr0.98La0.02Ti0.98Cr0.02O3``,
``Ca2(PO4)3``, ``K2La2Ti3O10``.  Amounts are kept as :class:`fractions.Fraction`
so that charge sums stay exact.  Anything else (empty text, Unicode subscripts,
signs, zero amounts, unknown symbols) raises :class:`ScreeningError` naming
what is wrong.
"""
from __future__ import annotations

import re
from fractions import Fraction

from screening.errors import ScreeningError

# [0-9], not \d: \d also matches Arabic-Indic and other Unicode digits, which Fraction would
# then read as numbers ("Ti٣O2" came out as Ti3O2).
_TOKEN = re.compile(r"([A-Z][a-z]?)|(\()|(\))|([0-9]+(?:\.[0-9]+)?|\.[0-9]+)")
_SUBSCRIPT_DIGITS = "₀₁₂₃₄₅₆₇₈₉"
MAX_LENGTH = 200
"""Longest formula accepted, in characters (doped formula units of oxides are a few dozen)."""
MAX_AMOUNT = 1000
"""Largest amount of one element per formula unit; larger ones are typing errors, and huge ones
would overflow the floats that the band-edge and cost stages compute with."""


def _known_symbols() -> frozenset[str]:
    from pymatgen.core.periodic_table import Element

    return frozenset(e.symbol for e in Element)


def parse_formula(text: str, *, source: str = "formula") -> dict[str, Fraction]:
    """Element -> amount (exact) of a formula; raises ScreeningError on anything malformed."""
    if not isinstance(text, str):
        raise ScreeningError(f"a formula must be text, got {type(text).__name__} {text!r}", source=source)
    if not text.strip():
        raise ScreeningError("empty formula", source=source)
    formula = text.strip()
    if len(formula) > MAX_LENGTH:
        raise ScreeningError(f"formula of {len(formula)} characters; at most {MAX_LENGTH} are accepted",
                             source=source)
    if any(ch in _SUBSCRIPT_DIGITS for ch in formula):
        raise ScreeningError(f"{formula!r} uses Unicode subscript digits; write plain digits, e.g. TiO2",
                             source=source)
    position = 0
    stack: list[dict[str, Fraction]] = [{}]
    last: dict[str, Fraction] | str | None = None  # what an amount would multiply
    symbols = _known_symbols()
    while position < len(formula):
        match = _TOKEN.match(formula, position)
        if not match:
            char = formula[position]
            if char in "+-":
                raise ScreeningError(f"sign {char!r} at character {position + 1} of {formula!r}: amounts must be "
                                     "positive plain numbers and charges are not written in formulas",
                                     source=source)
            raise ScreeningError(f"cannot read {formula!r} at character {position + 1} ({char!r}); a formula "
                                 "holds element symbols, plain ASCII amounts and parentheses", source=source)
        element, opening, closing, number = match.groups()
        if element:
            if element not in symbols:
                raise ScreeningError(f"unknown element symbol {element!r} in {formula!r}", source=source)
            stack[-1][element] = stack[-1].get(element, Fraction(0)) + 1
            last = element
        elif opening:
            stack.append({})
            last = None
        elif closing:
            if len(stack) == 1:
                raise ScreeningError(f"unbalanced ')' in {formula!r}", source=source)
            group = stack.pop()
            if not group:
                raise ScreeningError(f"empty parentheses in {formula!r}", source=source)
            for key, value in group.items():
                stack[-1][key] = stack[-1].get(key, Fraction(0)) + value
            last = group
        else:
            amount = Fraction(number)
            if amount <= 0:
                raise ScreeningError(f"zero amount in {formula!r}", source=source)
            if amount > MAX_AMOUNT:
                raise ScreeningError(f"amount {number} in {formula!r} is above {MAX_AMOUNT} per formula unit",
                                     source=source)
            if last is None:
                raise ScreeningError(f"amount {number!r} without an element in {formula!r}", source=source)
            if isinstance(last, str):
                stack[-1][last] += amount - 1
            else:
                for key, value in last.items():
                    stack[-1][key] += value * (amount - 1)
            last = None
        position = match.end()
    if len(stack) != 1:
        raise ScreeningError(f"unbalanced '(' in {formula!r}", source=source)
    if not stack[0]:
        raise ScreeningError(f"no element in {formula!r}", source=source)
    # nested groups multiply: (O999)999 passes the per-amount check but not this one
    too_large = sorted(k for k, v in stack[0].items() if v > MAX_AMOUNT)
    if too_large:
        raise ScreeningError(f"{', '.join(too_large)} comes to more than {MAX_AMOUNT} per formula unit in "
                             f"{formula!r}", source=source)
    return stack[0]


def format_formula(amounts: dict[str, Fraction], order: list[str] | None = None, digits: int = 4) -> str:
    """Amounts -> 'Sr0.98La0.02TiO3'; integers without decimals, others rounded for display."""
    keys = order or list(amounts)
    parts = []
    for key in keys:
        value = amounts.get(key, Fraction(0))
        if value == 0:
            continue
        if value == 1:
            parts.append(key)
        elif value.denominator == 1:
            parts.append(f"{key}{value.numerator}")
        else:
            parts.append(f"{key}{float(value):.{digits}f}".rstrip("0").rstrip("."))
    return "".join(parts)
