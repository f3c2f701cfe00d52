"""Rule sets: the criteria of one screen, loaded and checked once where they enter.

A rule set is a YAML file under ``rules/``; its keys, units, ranges and
defaults are written in the JSON Schema ``data/ruleset.schema.json`` beside
this module (JSON Schema 2020-12, checked with the ``jsonschema`` package).
An unknown key, a wrong type or an out-of-range value stops the screen before
any work with a message naming the file, the key and the allowed range.
Defaults from the schema are filled in, so every stage sees every key.

Keys that the schema cannot relate to each other are checked after the
defaults are filled (:func:`cross_checks`): a lower bound above its upper
bound, no enumeration at all, a pair that would replace more than a whole
site, a score with every weight zero.

``python -m screening.rulesets`` prints the README table "Rule-set keys",
generated from the schema (``--update-readme README.md`` rewrites it in place).
"""
from __future__ import annotations

import copy
import hashlib
import json
import math
from dataclasses import dataclass
from fractions import Fraction
from functools import lru_cache
from pathlib import Path

from screening.errors import ScreeningError
from screening.hosts import read_yaml

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
    structures_path: Path | None = None
    """The rule set's ``structures`` (a CIF file or folder), resolved and checked; None when it has none."""

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


def _non_finite(node, path=()):
    """Key path of the first NaN or infinite number (JSON Schema's bounds let NaN through)."""
    if isinstance(node, float) and not math.isfinite(node):
        return path
    if isinstance(node, dict):
        items = node.items()
    elif isinstance(node, list):
        items = enumerate(node)
    else:
        return None
    for key, value in items:
        found = _non_finite(value, (*path, key))
        if found is not None:
            return found
    return None


def validate_document(document, source: str) -> dict:
    """Check a parsed rule set against the schema; returns it with defaults filled in."""
    bad = _non_finite(document)
    if bad is not None:
        raise ScreeningError("must be a finite number, not NaN or infinity", source=source,
                             field=".".join(map(str, bad)))
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
    filled = _fill_defaults(schema(), copy.deepcopy(document))
    cross_checks(filled, source)
    return filled


# --- checks across keys ------------------------------------------------------------------

def _bound_pairs(node: dict):
    """(low key, high key) pairs of one mapping: min/max, min_X/max_X and X_min/X_max."""
    for key in node:
        if key == "min" and "max" in node:
            yield "min", "max"
        elif key.startswith("min_") and f"max_{key[4:]}" in node:
            yield key, f"max_{key[4:]}"
        elif key.endswith("_min") and f"{key[:-4]}_max" in node:
            yield key, f"{key[:-4]}_max"


def _mappings(node, path=()):
    if isinstance(node, dict):
        yield path, node
        for key, value in node.items():
            yield from _mappings(value, (*path, key))


def cross_checks(filled: dict, source: str) -> None:
    """Refuse combinations of keys that contradict each other (each key alone is in range)."""
    for path, node in _mappings(filled):
        for low_key, high_key in _bound_pairs(node):
            low, high = node[low_key], node[high_key]
            numbers = all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in (low, high))
            if numbers and low > high:
                where = ".".join((*path, low_key))
                raise ScreeningError(f"{low_key} = {low} is above {'.'.join((*path, high_key))} = {high}; "
                                     "the lower bound must not exceed the upper bound", source=source, field=where)
    enumeration = filled["enumeration"]
    if not enumeration["singles"] and not enumeration["pairs"]:
        raise ScreeningError("singles and pairs are both false, so nothing would be enumerated; "
                             "set at least one to true", source=source, field="enumeration")
    max_ratio = filled["filters"]["charge_balance"]["max_ratio"]
    fraction = Fraction(str(enumeration["dopant_fraction"]))
    if enumeration["pairs"] and fraction * (1 + max_ratio) > 1:
        # a 1:max_ratio pair on one site would need more ions than the site has
        raise ScreeningError(f"dopant_fraction {enumeration['dopant_fraction']} with "
                             f"filters.charge_balance.max_ratio {max_ratio} lets a pair replace "
                             f"{float(fraction * (1 + max_ratio)):g} of a site (more than all of it); "
                             f"dopant_fraction × (1 + max_ratio) must be at most 1",
                             source=source, field="enumeration.dopant_fraction")
    weights = filled["ranking"]["weights"]
    if all(float(w) == 0 for w in weights.values()):
        raise ScreeningError("every ranking weight is 0, so every score would be 0 and the rank meaningless; "
                             "give at least one weight a value above 0", source=source, field="ranking.weights")


# --- documentation from the schema -------------------------------------------------------

def _leaves(node: dict, path=()):
    for key, sub in node.get("properties", {}).items():
        if "properties" in sub:
            yield from _leaves(sub, (*path, key))
        else:
            yield (*path, key), sub


def _doc_value(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f"`{value}`" if value else '""'
    if isinstance(value, list):
        return "[" + ", ".join(map(str, value)) + "]"
    return f"{value:g}" if isinstance(value, float) else str(value)


def _doc_range(sub: dict) -> str:
    types = sub.get("type", [])
    types = [types] if isinstance(types, str) else list(types)
    nullable = "null" in types
    if "enum" in sub:
        text = " / ".join(map(str, sub["enum"]))
    elif "boolean" in types:
        text = "true / false"
    elif "array" in types:
        item_type = sub.get("items", {}).get("type")
        text = f"list of {item_type}s" if item_type else "list of values"
    elif "string" in types:
        text = "text" + (f" matching `{sub['pattern']}`" if "pattern" in sub else "")
    else:
        low = (f"> {sub['exclusiveMinimum']}" if "exclusiveMinimum" in sub
               else f"≥ {sub['minimum']}" if "minimum" in sub else "")
        high = (f"< {sub['exclusiveMaximum']}" if "exclusiveMaximum" in sub
                else f"≤ {sub['maximum']}" if "maximum" in sub else "")
        kind = "integer" if "integer" in types else "number"
        text = ", ".join(p for p in (kind + (f" {low}" if low else ""), high) if p)
    return text + (" or null (off)" if nullable else "")


def schema_table() -> str:
    """The README table of every rule-set key: unit, range, default, meaning (from the schema)."""
    required = set(schema().get("required", []))
    rows = ["| key | unit | range | default | meaning |", "|---|---|---|---|---|"]
    for path, sub in _leaves(schema()):
        key = ".".join(path)
        default = "required" if key in required else _doc_value(sub["default"]) if "default" in sub else "–"
        text = sub.get("description", "").replace("|", "\\|")
        rows.append(f"| `{key}` | {sub.get('unit', '')} | {_doc_range(sub)} | {default} | {text} |")
    return "\n".join(rows) + "\n"


README_START = "<!-- rule-set-keys: generated by `python -m screening.rulesets --update-readme README.md` -->"
README_END = "<!-- rule-set-keys: end -->"


def readme_block(readme_text: str) -> str | None:
    """The generated table as it stands in a README, or None if the markers are missing."""
    start, end = readme_text.find(README_START), readme_text.find(README_END)
    if start < 0 or end < start:
        return None
    return readme_text[start + len(README_START):end].strip("\n") + "\n"


def update_readme(path: Path) -> None:
    text = Path(path).read_text(encoding="utf-8")
    start, end = text.find(README_START), text.find(README_END)
    if start < 0 or end < start:
        raise ScreeningError(f"markers {README_START!r} ... {README_END!r} not found", source=str(path))
    Path(path).write_text(text[:start + len(README_START)] + "\n" + schema_table() + text[end:], encoding="utf-8")


def flatten(record: dict) -> dict[str, object]:
    """Nested mappings as 'key.subkey.leaf' -> value (empty mappings are leaves)."""
    flat = {}
    stack = [((), record)]
    while stack:
        path, value = stack.pop()
        if isinstance(value, dict) and value:
            stack.extend(((*path, str(k)), v) for k, v in value.items())
        else:
            flat[".".join(path)] = value
    return flat


def flat_sections(sections: dict) -> dict[str, object]:
    """Every criterion as 'section.key.subkey' -> value (for diffs and provenance)."""
    return dict(sorted(flatten(sections).items()))


def load_ruleset(path: str | Path) -> RuleSet:
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError("rule-set file not found", source=source)
    text = path.read_text(encoding="utf-8")
    # the strict safe loader: refuses repeated keys, Python tags and runaway nesting in one line
    document = read_yaml(path, "rule-set")
    if not isinstance(document, dict):
        raise ScreeningError("a rule set must be a YAML mapping", source=source)
    filled = validate_document(document, source)
    base = path.resolve().parent
    hosts_path = (base / filled["hosts"]).resolve()
    pool_path = (base / filled["dopant_pool"]).resolve()
    for key, target in (("hosts", hosts_path), ("dopant_pool", pool_path)):
        if not target.is_file():
            raise ScreeningError(f"names {filled[key]!r}, which is not a file ({target})", source=source, field=key)
    structures_path = None
    if filled.get("structures") is not None:
        structures_path = (base / filled["structures"]).resolve()
        if not structures_path.exists():
            raise ScreeningError(f"names {filled['structures']!r}, which is neither a file nor a folder "
                                 f"({structures_path})", source=source, field="structures")
    return RuleSet(path=path.resolve(), name=filled["name"], description=filled.get("description", ""),
                   hosts_path=hosts_path, pool_path=pool_path,
                   sections={name: filled[name] for name in SECTIONS}, text=text,
                   structures_path=structures_path)


if __name__ == "__main__":
    import sys

    if sys.argv[1:2] == ["--update-readme"] and len(sys.argv) == 3:
        update_readme(Path(sys.argv[2]))
    elif len(sys.argv) == 1:
        print(schema_table(), end="")
    else:
        sys.exit("usage: python -m screening.rulesets [--update-readme README.md]")
