"""Rule-set schema, cross-field checks, the README key table and the shipped rule sets."""
from __future__ import annotations

from pathlib import Path

import jsonschema
import pytest
import yaml

from screening import cli, hosts, pools, rulesets
from screening.errors import ScreeningError

REPO = Path(__file__).resolve().parents[1]
RULES_DIR = REPO / "rules"
WEIGHTS = list(rulesets.schema()["properties"]["ranking"]["properties"]["weights"]["properties"])


def _leaves(node, path=()):
    for key, sub in node.get("properties", {}).items():
        if "properties" in sub:
            yield from _leaves(sub, (*path, key))
        else:
            yield ".".join((*path, key)), sub


def test_schema_is_valid_json_schema_2020_12():
    # the reference validator's meta-schema check (jsonschema package, JSON Schema draft 2020-12)
    jsonschema.Draft202012Validator.check_schema(rulesets.schema())


def test_every_key_has_unit_range_and_default():
    required = set(rulesets.schema()["required"])
    missing = []
    for key, sub in _leaves(rulesets.schema()):
        if not sub.get("description"):
            missing.append(f"{key}: description")
        if not sub.get("unit"):
            missing.append(f"{key}: unit")
        if "default" not in sub and key not in required:
            missing.append(f"{key}: default")
        numeric = {"number", "integer"} & set([sub["type"]] if isinstance(sub.get("type"), str) else sub.get("type", []))
        if numeric and not ({"minimum", "exclusiveMinimum"} & set(sub)):
            missing.append(f"{key}: lower bound")
        if "default" in sub:
            # each default must itself be allowed by its own key's schema
            jsonschema.Draft202012Validator(sub).validate(sub["default"])
    assert not missing, missing


def test_readme_table_agrees_with_schema():
    block = rulesets.readme_block((REPO / "README.md").read_text(encoding="utf-8"))
    assert block is not None, "README has no generated 'Rule-set keys' table markers"
    assert block == rulesets.schema_table(), (
        "README 'Rule-set keys' table differs from the schema; regenerate it with "
        "`python -m screening.rulesets --update-readme README.md`")
    keys = [line.split("`")[1] for line in block.splitlines()[2:]]
    assert keys == [key for key, _ in _leaves(rulesets.schema())]


def _write(tmp_path, small_screen, changes: dict) -> Path:
    document = yaml.safe_load(small_screen.read_text())
    for dotted, value in changes.items():
        node = document
        *parents, last = dotted.split(".")
        for key in parents:
            node = node.setdefault(key, {})
        node[last] = value
    path = tmp_path / "changed.yaml"
    path.write_text(yaml.safe_dump(document, sort_keys=False))
    return path


@pytest.mark.parametrize("changes, field, words", [
    ({"filters.radius_mismatch.max_relatve": 0.1}, "filters.radius_mismatch", ["max_relatve", "max_relative"]),
    ({"filters.radius_mismatch.max_relative": 1.5}, "filters.radius_mismatch.max_relative", ["1.5", "<= 1"]),
    ({"filters.charge_balance.max_ratio": "two"}, "filters.charge_balance.max_ratio", ["'two'", "type integer"]),
    ({"alignment.mode": "both"}, "alignment.mode", ["overall, hydrogen, oxygen"]),
    ({"alignment.ph": -1}, "alignment.ph", [">= 0", "<= 14"]),
])
def test_bad_values_name_key_and_range(tmp_path, small_screen, changes, field, words):
    path = _write(tmp_path, small_screen, changes)
    with pytest.raises(ScreeningError) as info:
        rulesets.load_ruleset(path)
    assert info.value.field == field
    assert info.value.source == str(path)
    for word in words:
        assert word in str(info.value)


@pytest.mark.parametrize("changes, field, words", [
    # Goldschmidt tolerance window upside down (keys of the lattice rule)
    ({"filters.lattice.tolerance.min": 1.0, "filters.lattice.tolerance.max": 0.9},
     "filters.lattice.tolerance.min", ["min = 1.0 is above filters.lattice.tolerance.max = 0.9"]),
    ({"enumeration.singles": False, "enumeration.pairs": False}, "enumeration", ["nothing would be enumerated"]),
    # 0.25 of a site for the acceptor and 4 x 0.25 for its donor: more than the whole site
    ({"enumeration.dopant_fraction": 0.25, "filters.charge_balance.max_ratio": 4},
     "enumeration.dopant_fraction", ["1.25 of a site", "at most 1"]),
    ({"ranking.weights": dict.fromkeys(WEIGHTS, 0)}, "ranking.weights", ["every ranking weight is 0"]),
])
def test_cross_field_conflicts_are_refused(tmp_path, small_screen, changes, field, words):
    path = _write(tmp_path, small_screen, changes)
    with pytest.raises(ScreeningError) as info:
        rulesets.load_ruleset(path)
    assert info.value.field == field
    for word in words:
        assert word in str(info.value)


def test_cross_checks_allow_the_edges(tmp_path, small_screen):
    # equal bounds, pairs off with a large fraction, one weight left: all legitimate
    path = _write(tmp_path, small_screen, {
        "filters.lattice.tolerance.min": 0.95, "filters.lattice.tolerance.max": 0.95,
        "enumeration.pairs": False, "enumeration.dopant_fraction": 0.25, "filters.charge_balance.max_ratio": 8,
        "ranking.weights": {**dict.fromkeys(WEIGHTS, 0), "strain": 0.1}})
    rules = rulesets.load_ruleset(path)
    assert rules.sections["filters"]["lattice"]["tolerance"] == {"min": 0.95, "max": 0.95}


def test_null_bound_is_not_compared(tmp_path, small_screen):
    path = _write(tmp_path, small_screen, {"filters.lattice.tolerance.min": None,
                                           "filters.lattice.tolerance.max": 0.9})
    assert rulesets.load_ruleset(path).sections["filters"]["lattice"]["tolerance"]["min"] is None


SHIPPED = sorted(RULES_DIR.glob("*.yaml"))


def test_at_least_three_rule_sets_with_distinct_names():
    names = [rulesets.load_ruleset(p).name for p in SHIPPED]
    assert {"default", "earth-abundant", "exploratory"} <= set(names)
    assert len(names) == len(set(names)), names


@pytest.mark.parametrize("path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_shipped_rule_sets_load_with_their_inputs(path):
    rules = rulesets.load_ruleset(path)
    assert rules.name == path.stem  # results/<name>/ then matches the file name
    assert hosts.load_hosts(rules.hosts_path)
    assert pools.load_pool(rules.pool_path)


def test_rule_sets_serve_their_aims():
    default = rulesets.load_ruleset(RULES_DIR / "default.yaml").sections
    strict = rulesets.load_ruleset(RULES_DIR / "earth-abundant.yaml").sections
    wide = rulesets.load_ruleset(RULES_DIR / "exploratory.yaml").sections
    # strict: every scarcity limit set and at least as tight as the default's
    assert strict["scarcity"]["min_crust_ppm"] >= default["scarcity"]["min_crust_ppm"]
    assert strict["scarcity"]["max_cost_usd_per_kg"] <= default["scarcity"]["max_cost_usd_per_kg"]
    # 2500: the DOJ/FTC (2010) "highly concentrated" HHI band (from memory)
    assert strict["scarcity"]["max_hhi_production"] == 2500 and strict["scarcity"]["max_hhi_reserves"] == 2500
    # permissive: 30 % size mismatch, ratios to 1:3, only the radioactivity rule left
    assert wide["filters"]["radius_mismatch"]["max_relative"] == 0.30
    assert wide["filters"]["charge_balance"]["max_ratio"] == 3
    assert wide["scarcity"] == {"min_crust_ppm": None, "exclude_radioactive": True, "max_cost_usd_per_kg": None,
                                "max_hhi_production": None, "max_hhi_reserves": None}
    hydrogen = rulesets.load_ruleset(RULES_DIR / "z-scheme-hydrogen.yaml").sections
    assert hydrogen["alignment"]["mode"] == "hydrogen"


def test_missing_host_file_stops_run_before_any_work(tmp_path, small_screen, capsys):
    (small_screen.parent / "small_hosts.yaml").unlink()
    out = tmp_path / "results"
    code = cli.main(["run", "--rules", str(small_screen), "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2
    assert "field 'hosts'" in err and "small_hosts.yaml" in err and "not a file" in err
    assert not out.exists()


def test_update_readme_rewrites_only_the_block(tmp_path):
    readme = tmp_path / "README.md"
    readme.write_text(f"# x\n\nbefore\n{rulesets.README_START}\nstale\n{rulesets.README_END}\nafter\n")
    rulesets.update_readme(readme)
    text = readme.read_text()
    assert text.startswith("# x\n\nbefore\n") and text.endswith(f"{rulesets.README_END}\nafter\n")
    assert rulesets.readme_block(text) == rulesets.schema_table()
