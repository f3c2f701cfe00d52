"""Host libraries: loading and checking the oxide hosts a screen substitutes into.

A host library is a YAML file (format described in ``candidates/README.md``)
listing, for each host, its formula, structure family, measured band gap with
source, every cation site (element, oxidation state, coordination number,
multiplicity per formula unit) and the anion site.  Everything is checked
here, once, as it enters: ids, required fields and types, known elements,
oxidation states that the element takes, exact charge neutrality, that the
sites reproduce the formula, and that every site ion has a Shannon radius at
its coordination (Shannon, Acta Cryst. A32 (1976) 751).  A failure raises
:class:`ScreeningError` naming the file, the host and the field.

YAML is read with :class:`StrictSafeLoader` (PyYAML's safe loader, which builds
only plain data, plus a refusal of keys repeated in one mapping); :func:`read_yaml`
is shared with the pool loader.
"""
from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass, field
from fractions import Fraction
from pathlib import Path

import pandas as pd
import yaml

from screening import ions
from screening.errors import ScreeningError
from screening.formulas import parse_formula

# Anchored with \Z, not "$": "$" also matches before a trailing newline, so an id "SrTiO3\n"
# would pass; \Z makes .match() as strict as .fullmatch() for every caller (structures.py uses
# .match).  64 characters keeps ids well inside file-name limits.
HOST_ID = re.compile(r"[A-Za-z0-9][A-Za-z0-9_-]{0,63}\Z")
SITE_LABEL = re.compile(r"[A-Z][a-z]?[0-9]*\Z")
_TEXT_FIELDS = ("name", "family", "gap_source", "gap_type", "structure_source", "notes")
_HOST_FIELDS = {"id", "name", "formula", "family", "gap_ev", "gap_type", "gap_source", "sites", "anion",
                "structure_source", "notes"}
_REQUIRED = ("id", "formula", "family", "gap_ev", "gap_source", "sites", "anion")
_SITE_FIELDS = {"label", "element", "oxidation_state", "coordination", "multiplicity"}


@dataclass(frozen=True)
class Site:
    label: str
    element: str
    oxidation_state: int
    coordination: int
    multiplicity: int
    radius_a: float
    radius_estimated: bool


@dataclass(frozen=True)
class Host:
    id: str
    formula: str
    family: str
    gap_ev: float
    gap_source: str
    sites: tuple[Site, ...]
    anion: Site
    name: str = ""
    extra: dict = field(default_factory=dict, compare=False)

    def composition(self) -> dict[str, Fraction]:
        amounts: dict[str, Fraction] = {}
        for site in (*self.sites, self.anion):
            amounts[site.element] = amounts.get(site.element, Fraction(0)) + site.multiplicity
        return amounts


def library_hash(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


class StrictSafeLoader(yaml.SafeLoader):
    """``yaml.SafeLoader`` that also refuses a key repeated within one mapping.

    Plain YAML keeps the last of two equal keys without a word, so a host
    entry edited by hand with two ``oxidation_state:`` lines would be screened
    with whichever came last.  Only the safe constructors exist: tags that
    build Python objects (``!!python/object``...) are refused.
    """

    def construct_mapping(self, node, deep=False):
        if isinstance(node, yaml.MappingNode):
            seen: dict = {}
            for key_node, _ in node.value:
                if key_node.tag == "tag:yaml.org,2002:merge":
                    continue  # keys a merge ('<<') brings in may be overridden on purpose
                key = self.construct_object(key_node, deep=deep)
                try:
                    first = seen.get(key)
                except TypeError:
                    continue  # unhashable key: the base constructor reports it
                if first is not None:
                    raise yaml.constructor.ConstructorError(
                        None, None, f"key {key!r} appears twice in one mapping (first at line {first})",
                        key_node.start_mark)
                seen[key] = key_node.start_mark.line + 1
        return super().construct_mapping(node, deep=deep)


def read_yaml(path: Path, what: str):
    """Parse a YAML file with :class:`StrictSafeLoader`; every failure is a one-line ScreeningError."""
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError(f"{what} file not found", source=source)
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ScreeningError("not a UTF-8 text file", source=source) from None
    try:
        return yaml.load(text, Loader=StrictSafeLoader)  # noqa: S506 -- a SafeLoader subclass
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = str(getattr(exc, "problem", None) or exc)
        if "could not determine a constructor for the tag" in problem:
            problem = (problem.replace("could not determine a constructor for the tag", "the tag")
                       + " is refused: only plain YAML data is read (safe loading, no Python objects)")
        raise ScreeningError(f"not valid YAML{where}: {' '.join(problem.split())}", source=source) from None
    except RecursionError:
        raise ScreeningError("not valid YAML: nested too deeply", source=source) from None


def _int_field(value, *, source, entry, field_name, low, high):
    if isinstance(value, bool) or not isinstance(value, int):
        raise ScreeningError(f"must be an integer from {low} to {high}, got {value!r}",
                             source=source, entry=entry, field=field_name)
    if not low <= value <= high:
        raise ScreeningError(f"must be from {low} to {high}, got {value}",
                             source=source, entry=entry, field=field_name)
    return value


def _keys_text(keys) -> str:
    # repr, so that a key holding a newline cannot split the one-line message
    return ", ".join(sorted(repr(k) if not isinstance(k, str) or not k.isidentifier() else k for k in keys))


def _parse_site(raw, *, source, entry, field_name, anion: bool) -> dict:
    if not isinstance(raw, dict):
        raise ScreeningError("must be a mapping with " + ", ".join(sorted(_SITE_FIELDS)),
                             source=source, entry=entry, field=field_name)
    allowed = _SITE_FIELDS - ({"label"} if anion else set())
    unknown = set(raw) - allowed - {"label"}
    if unknown:
        raise ScreeningError(f"unknown key(s) {_keys_text(unknown)}; allowed: "
                             + ", ".join(sorted(allowed)), source=source, entry=entry, field=field_name)
    for key in sorted(allowed - {"label"}):
        if key not in raw:
            raise ScreeningError(f"missing {key!r}", source=source, entry=entry, field=field_name)
    element = raw["element"]
    if not isinstance(element, str) or element not in ions.load_ion_data().elements.index:
        raise ScreeningError(f"unknown element {element!r}", source=source, entry=entry,
                             field=f"{field_name}.element")
    if anion:
        charge = _int_field(raw["oxidation_state"], source=source, entry=entry,
                            field_name=f"{field_name}.oxidation_state", low=-4, high=-1)
    else:
        charge = _int_field(raw["oxidation_state"], source=source, entry=entry,
                            field_name=f"{field_name}.oxidation_state", low=1, high=8)
    states = ions.oxidation_states(element)
    if charge not in set(states["charge"]):
        raise ScreeningError(
            f"{element} does not take the oxidation state {charge:+d} (mendeleev lists "
            f"{', '.join(f'{c:+d}' for c in sorted(states['charge']))})",
            source=source, entry=entry, field=f"{field_name}.oxidation_state")
    cn = _int_field(raw["coordination"], source=source, entry=entry,
                    field_name=f"{field_name}.coordination", low=1, high=14)
    multiplicity = _int_field(raw["multiplicity"], source=source, entry=entry,
                              field_name=f"{field_name}.multiplicity", low=1, high=64)
    label = raw.get("label", element)
    if not isinstance(label, str) or not SITE_LABEL.fullmatch(label) or not label.startswith(element):
        raise ScreeningError(f"site label {label!r} must be the element symbol, numbered where one element "
                             "has inequivalent sites (e.g. Ga1, Ga2)", source=source, entry=entry,
                             field=f"{field_name}.label")
    return {"label": label, "element": element, "oxidation_state": charge, "coordination": cn,
            "multiplicity": multiplicity, "field": field_name}


def _check_host(raw, index: int, source: str) -> dict:
    entry = str(raw.get("id", f"#{index + 1}")) if isinstance(raw, dict) else f"#{index + 1}"
    if not isinstance(raw, dict):
        raise ScreeningError("each host must be a mapping", source=source, entry=entry)
    unknown = set(raw) - _HOST_FIELDS
    if unknown:
        raise ScreeningError(f"unknown key(s) {_keys_text(unknown)}; allowed: "
                             + ", ".join(sorted(_HOST_FIELDS)), source=source, entry=entry)
    for key in _REQUIRED:
        if key not in raw or raw[key] in (None, ""):
            raise ScreeningError("missing", source=source, entry=entry, field=key)
    host_id = raw["id"]
    if not isinstance(host_id, str):
        hint = " (unquoted yes/no/on/off read as a boolean: quote the id)" if isinstance(host_id, bool) else ""
        raise ScreeningError(f"host id must be text, got {type(host_id).__name__} {host_id!r}{hint}",
                             source=source, entry=entry, field="id")
    if not HOST_ID.fullmatch(host_id):
        raise ScreeningError(f"host id {host_id!r} may hold only letters, digits, '-' and '_', start with a "
                             "letter or digit and be at most 64 long (it names results entries; no path "
                             "separators or '..')", source=source, entry=entry, field="id")
    for key in _TEXT_FIELDS:
        if key in raw and not isinstance(raw[key], str):
            raise ScreeningError(f"must be text, got {type(raw[key]).__name__} {raw[key]!r}",
                                 source=source, entry=entry, field=key)
    if not isinstance(raw["formula"], str):
        raise ScreeningError("must be a formula string", source=source, entry=entry, field="formula")
    formula = parse_formula(raw["formula"], source=f"{source}: entry {entry!r}: field 'formula'")
    gap = raw["gap_ev"]
    if isinstance(gap, bool) or not isinstance(gap, (int, float)) or not 0.1 <= gap <= 12:
        raise ScreeningError(f"must be a band gap in eV from 0.1 to 12, got {gap!r}",
                             source=source, entry=entry, field="gap_ev")
    if not isinstance(raw["sites"], list) or not raw["sites"]:
        raise ScreeningError("must be a non-empty list of cation sites", source=source, entry=entry,
                             field="sites")
    sites = [_parse_site(s, source=source, entry=entry, field_name=f"sites[{i}]", anion=False)
             for i, s in enumerate(raw["sites"])]
    labels = [s["label"] for s in sites]
    if len(set(labels)) != len(labels):
        raise ScreeningError(f"site labels repeat: {labels}; number inequivalent sites of one element",
                             source=source, entry=entry, field="sites")
    anion = _parse_site(raw["anion"], source=source, entry=entry, field_name="anion", anion=True)
    if anion["element"] != "O":
        raise ScreeningError(f"the screen handles oxide hosts; anion is {anion['element']}",
                             source=source, entry=entry, field="anion.element")

    charge = sum(s["oxidation_state"] * s["multiplicity"] for s in sites) \
        + anion["oxidation_state"] * anion["multiplicity"]
    if charge != 0:
        raise ScreeningError(f"host is not neutral: cation and anion charges sum to {charge:+d} per formula unit",
                             source=source, entry=entry, field="sites")
    from_sites: dict[str, Fraction] = {}
    for s in (*sites, anion):
        from_sites[s["element"]] = from_sites.get(s["element"], Fraction(0)) + s["multiplicity"]
    if from_sites != formula:
        raise ScreeningError(f"site multiplicities give {dict((k, str(v)) for k, v in from_sites.items())}, "
                             f"formula {raw['formula']!r} gives {dict((k, str(v)) for k, v in formula.items())}",
                             source=source, entry=entry, field="sites")
    return {"id": host_id, "name": str(raw.get("name", "")), "formula": raw["formula"],
            "family": str(raw["family"]), "gap_ev": float(gap), "gap_source": str(raw["gap_source"]),
            "sites": sites, "anion": anion,
            "extra": {k: raw[k] for k in ("gap_type", "structure_source", "notes") if k in raw}}


def load_hosts(path: str | Path) -> list[Host]:
    """Read and check a host library; raises ScreeningError on the first problem."""
    path = Path(path)
    source = str(path)
    document = read_yaml(path, "host library")
    if not isinstance(document, dict) or not isinstance(document.get("hosts"), list) or not document["hosts"]:
        raise ScreeningError("must be a mapping with a non-empty list under 'hosts'", source=source, field="hosts")
    checked = [_check_host(raw, i, source) for i, raw in enumerate(document["hosts"])]
    seen: dict[str, str] = {}
    for host in checked:
        # ids that differ only in case collide on case-insensitive file systems (macOS, Windows)
        folded = host["id"].casefold()
        if folded in seen:
            also = "" if seen[folded] == host["id"] else f" (same as {seen[folded]!r} but for case)"
            raise ScreeningError(f"duplicate host id{also}", source=source, entry=host["id"], field="id")
        seen[folded] = host["id"]

    site_rows = [{"host": h["id"], **s} for h in checked for s in (*h["sites"], h["anion"])]
    table = pd.DataFrame(site_rows)
    radii = ions.lookup_radii(table.rename(columns={"oxidation_state": "charge"}))
    table["radius_a"] = radii["radius_a"].to_numpy()
    table["radius_estimated"] = radii["radius_estimated"].to_numpy()
    lacking = table[table["radius_a"].isna() | table["radius_estimated"]]
    if not lacking.empty:
        row = lacking.iloc[0]
        raise ScreeningError(
            f"{ions.ion_label(row['element'], row['oxidation_state'])} has no Shannon radius at coordination "
            f"{row['coordination']}; give a coordination the table lists for this ion",
            source=source, entry=row["host"], field=f"{row['field']}.coordination")
    radius_of = {(r.host, r.label, r.element): r.radius_a for r in table.itertuples()}

    hosts = []
    for h in checked:
        def make(s):
            return Site(s["label"], s["element"], s["oxidation_state"], s["coordination"], s["multiplicity"],
                        float(radius_of[(h["id"], s["label"], s["element"])]), False)
        hosts.append(Host(h["id"], h["formula"], h["family"], h["gap_ev"], h["gap_source"],
                          tuple(make(s) for s in h["sites"]), make(h["anion"]), h["name"], h["extra"]))
    return hosts


def sites_frame(hosts: list[Host]) -> pd.DataFrame:
    """One row per cation site of every host, the table the enumeration works on."""
    return pd.DataFrame([
        {"host": h.id, "site": s.label, "site_element": s.element, "site_charge": s.oxidation_state,
         "coordination": s.coordination, "multiplicity": s.multiplicity, "site_radius_a": s.radius_a,
         "host_gap_ev": h.gap_ev}
        for h in hosts for s in h.sites])


def hosts_to_records(hosts: list[Host]) -> list[dict]:
    """Plain dictionaries (for JSON stage files)."""
    from dataclasses import asdict

    return [asdict(h) for h in hosts]


def hosts_from_records(records: list[dict]) -> list[Host]:
    return [Host(r["id"], r["formula"], r["family"], r["gap_ev"], r["gap_source"],
                 tuple(Site(**s) for s in r["sites"]), Site(**r["anion"]), r.get("name", ""),
                 r.get("extra", {})) for r in records]
