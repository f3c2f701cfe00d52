"""Rule sets: the criteria of one screen, loaded and checked once where they enter.

A rule set is a YAML file under ``rules/``; its keys, units, ranges and
defaults are written in the JSON Schema ``data/ruleset.schema.json`` beside
this module (JSON Schema 2020-12, checked with the ``jsonschema`` package).
An unknown key, a wrong type or an out-of-range value stops the screen before
any work with a message naming the file, the key and the allowed range.
Defaults from the schema are filled in, so every stage sees every key.
"""
from __future__ import annotations

import copy
import hashlib
import json
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from pathlib import Path

import yaml

from screening.errors import ScreeningError

SCHEMA_FILE = Path(__file__).with_name("data") / "ruleset.schema.json"
SECTIONS = ("workflow", "enumeration", "filters", "scarcity", "alignment", "ranking")


@lru_cache(maxsize=1)
def schema() -> dict:
    return json.loads(SCHEMA_FILE.read_text())


@dataclass(frozen=True)
class RuleSet:
    path: Path
    name: str
    description: str
    hosts_path: Path
    pool_path: Path
    sections: dict
    text: str

    @property
    def sha256(self) -> str:
        return hashlib.sha256(self.text.encode()).hexdigest()

    def section(self, name: str) -> dict:
        return copy.deepcopy(self.sections[name])

    def dopant_fraction(self) -> Fraction:
        # exact decimal: 0.02 -> 1/50, not the nearest binary float
        return Fraction(str(self.sections["enumeration"]["dopant_fraction"]))


def _fill_defaults(node_schema: dict, value):
    if node_schema.get("type") == "object" and isinstance(value, dict):
        for key, sub in node_schema.get("properties", {}).items():
            if key not in value and "default" in sub:
                value[key] = copy.deepcopy(sub["default"])
            if key in value:
                value[key] = _fill_defaults(sub, value[key])
    return value


def _range_text(sub: dict) -> str:
    parts = []
    if "enum" in sub:
        parts.append("one of " + ", ".join(map(str, sub["enum"])))
    for key, word in (("minimum", ">="), ("exclusiveMinimum", ">"), ("maximum", "<="), ("exclusiveMaximum", "<")):
        if key in sub:
            parts.append(f"{word} {sub[key]}")
    if "type" in sub:
        parts.insert(0, "type " + (" or ".join(sub["type"]) if isinstance(sub["type"], list) else sub["type"]))
    if "pattern" in sub:
        parts.append(f"matching {sub['pattern']}")
    return ", ".join(parts)


def _schema_at(path) -> dict:
    node = schema()
    for key in path:
        node = node.get("properties", {}).get(key, {}) if isinstance(key, str) else node
    return node


def validate_document(document, source: str) -> dict:
    """Check a parsed rule set against the schema; returns it with defaults filled in."""
    import jsonschema

    validator = jsonschema.Draft202012Validator(schema())
    errors = sorted(validator.iter_errors(document), key=lambda e: (len(e.absolute_path), list(map(str, e.absolute_path))))
    if errors:
        error = errors[0]
        key_path = ".".join(map(str, error.absolute_path)) or "(top level)"
        if error.validator == "additionalProperties":
            allowed = sorted(error.schema.get("properties", {}))
            extra = sorted(set(error.instance) - set(allowed))
            raise ScreeningError(f"unknown key(s) {', '.join(extra)}; allowed here: {', '.join(allowed)}",
                                 source=source, field=key_path if error.absolute_path else None)
        if error.validator == "required":
            raise ScreeningError(error.message, source=source, field=key_path if error.absolute_path else None)
        sub = _schema_at(error.absolute_path)
        raise ScreeningError(f"value {error.instance!r} is not allowed: {_range_text(sub) or error.message}",
                             source=source, field=key_path)
    return _fill_defaults(schema(), copy.deepcopy(document))


def load_ruleset(path: str | Path) -> RuleSet:
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError("rule-set file not found", source=source)
    text = path.read_text(encoding="utf-8")
    try:
        document = yaml.safe_load(text)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        raise ScreeningError(f"not valid YAML{where}: {getattr(exc, 'problem', exc)}", source=source) from None
    if not isinstance(document, dict):
        raise ScreeningError("a rule set must be a YAML mapping", source=source)
    filled = validate_document(document, source)
    base = path.resolve().parent
    hosts_path = (base / filled["hosts"]).resolve()
    pool_path = (base / filled["dopant_pool"]).resolve()
    for key, target in (("hosts", hosts_path), ("dopant_pool", pool_path)):
        if not target.is_file():
            raise ScreeningError(f"names {filled[key]!r}, which is not a file ({target})", source=source, field=key)
    return RuleSet(path=path.resolve(), name=filled["name"], description=filled.get("description", ""),
                   hosts_path=hosts_path, pool_path=pool_path,
                   sections={name: filled[name] for name in SECTIONS}, text=text)
