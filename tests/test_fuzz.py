"""Fuzzing the formula parser and the host-file parser (issue 9, item 4) with hypothesis.

The property: whatever text comes in, ``parse_formula`` and ``load_hosts`` either return a result or
raise :class:`ScreeningError` (or a subclass) -- never a ``KeyError``, ``TypeError``, ``RecursionError``
or any other exception that the command line would show as a traceback -- and the message is one line,
since the command line prints it as one.

Inputs mix three sources: arbitrary text; text built from the pieces a formula is made of (symbols,
digits, dots, parentheses, signs, Unicode digits and subscripts); and, for host files, valid host
entries from ``tests/data/small_hosts.yaml`` with one value replaced by an arbitrary YAML value, or the
file's text cut, spliced or with characters inserted.
"""
from __future__ import annotations

import copy
from fractions import Fraction
from pathlib import Path

import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from screening import hosts
from screening.errors import ScreeningError
from screening.formulas import parse_formula

DATA = Path(__file__).resolve().parent / "data"
SMALL_HOSTS_TEXT = (DATA / "small_hosts.yaml").read_text(encoding="utf-8")
SMALL_HOSTS = yaml.safe_load(SMALL_HOSTS_TEXT)

FAST = settings(max_examples=200, deadline=None)
HOST_SETTINGS = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])

# --- formulas -----------------------------------------------------------------------------------

_PIECES = st.sampled_from(["Ti", "O", "Sr", "La", "Cr", "Xx", "D", "T", "(", ")", "0", "1", "2", "0.02", ".5",
                           "2.", "-", "+", " ", "₂", "²", "٣", "e", "E", "1e3", "\n", "\t", "\x00", "ＴＩ", "9" * 25])
formula_like = st.lists(_PIECES, max_size=12).map("".join)


def _check_formula(text):
    try:
        result = parse_formula(text)
    except ScreeningError as error:
        assert "\n" not in str(error), repr(str(error))
        return
    # a result must be a real composition: known keys, positive exact amounts
    assert result and all(isinstance(v, Fraction) and v > 0 for v in result.values())
    assert all(isinstance(k, str) and k[:1].isupper() for k in result)


@FAST
@given(st.text(max_size=60))
def test_formula_parser_on_arbitrary_text(text):
    _check_formula(text)


@FAST
@given(formula_like)
def test_formula_parser_on_formula_pieces(text):
    _check_formula(text)


@settings(max_examples=50, deadline=None)
@given(st.one_of(st.none(), st.integers(), st.floats(), st.binary(max_size=10), st.lists(st.text(max_size=3))))
def test_formula_parser_on_values_that_are_not_text(value):
    _check_formula(value)


def test_formula_parser_round_trip_examples():
    # the fuzz property accepts results; these pin what a result must be (hand-worked amounts)
    assert parse_formula("Sr0.98La0.02Ti0.98Cr0.02O3") == {
        "Sr": Fraction(49, 50), "La": Fraction(1, 50), "Ti": Fraction(49, 50), "Cr": Fraction(1, 50), "O": 3}
    assert parse_formula("Ca2(PO4)3") == {"Ca": 2, "P": 3, "O": 12}


# --- host files ---------------------------------------------------------------------------------

yaml_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6), st.floats(allow_nan=True),
              st.text(max_size=12)),
    lambda children: st.one_of(st.lists(children, max_size=3),
                               st.dictionaries(st.text(max_size=8), children, max_size=3)),
    max_leaves=8)

_PATHS = [("id",), ("formula",), ("family",), ("gap_ev",), ("gap_source",), ("sites",), ("anion",),
          ("sites", 0), ("sites", 0, "element"), ("sites", 0, "oxidation_state"), ("sites", 0, "coordination"),
          ("sites", 0, "multiplicity"), ("sites", 0, "label"), ("anion", "element"), ("anion", "coordination"),
          ("anion", "oxidation_state"), ("name",), ("notes",)]


def _load_text(tmp_path_factory, text: str):
    path = tmp_path_factory.mktemp("fuzz") / "hosts.yaml"
    path.write_text(text, encoding="utf-8", errors="surrogatepass")
    _load_path(path)


def _load_path(path: Path):
    try:
        result = hosts.load_hosts(path)
    except ScreeningError as error:
        assert "\n" not in str(error), repr(str(error))
        assert str(path) in str(error)
        return
    assert result and all(isinstance(h, hosts.Host) for h in result)


@HOST_SETTINGS
@given(host=st.sampled_from(range(len(SMALL_HOSTS["hosts"]))), where=st.sampled_from(_PATHS), value=yaml_values)
def test_host_parser_with_one_value_replaced(tmp_path_factory, host, where, value):
    document = copy.deepcopy(SMALL_HOSTS)
    node = document["hosts"][host]
    for key in where[:-1]:
        node = node[key]
    node[where[-1]] = value
    _load_text(tmp_path_factory, yaml.safe_dump(document, allow_unicode=True))


@HOST_SETTINGS
@given(cut=st.integers(0, len(SMALL_HOSTS_TEXT)), insert=st.text(max_size=8),
       drop=st.integers(0, 40))
def test_host_parser_on_damaged_text(tmp_path_factory, cut, insert, drop):
    text = SMALL_HOSTS_TEXT[:cut] + insert + SMALL_HOSTS_TEXT[cut + drop:]
    _load_text(tmp_path_factory, text)


@HOST_SETTINGS
@given(text=st.text(max_size=200))
def test_host_parser_on_arbitrary_text(tmp_path_factory, text):
    _load_text(tmp_path_factory, text)


@settings(max_examples=30, deadline=None)
@given(data=st.binary(max_size=64))
def test_host_parser_on_arbitrary_bytes(tmp_path_factory, data):
    path = tmp_path_factory.mktemp("fuzz") / "hosts.yaml"
    path.write_bytes(data)
    _load_path(path)


def test_host_parser_on_deep_nesting(tmp_path):
    # PyYAML's composer recurses per level; 1000 levels exhaust the default stack (RecursionError, not a YAMLError)
    path = tmp_path / "hosts.yaml"
    path.write_text("hosts: " + "[" * 1000 + "]" * 1000 + "\n")
    _load_path(path)
