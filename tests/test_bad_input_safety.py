"""Safe parsing (issue 9, item 5): YAML is loaded safely everywhere, and no id or name escapes the results folder.

PyYAML's ``yaml.load`` with its full or unsafe loader builds arbitrary Python objects from tags such as
``!!python/object/apply:os.system``; ``yaml.safe_load`` (and subclasses of ``yaml.SafeLoader``) builds only
plain data (PyYAML documentation, "Loading YAML"; common practice).  The fixtures in ``tests/data/bad/``
carry a tag that, under an unsafe loader, would create the folder ``pwned-by-yaml`` in the working
directory, so each test can see that nothing ran as well as that an error came back.
"""
from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pytest
import yaml

from screening import cli, hosts, pools, rulesets, scarcity
from screening.errors import ScreeningError

TESTS = Path(__file__).resolve().parent
REPO = TESTS.parent
BAD = TESTS / "data" / "bad"
DATA = TESTS / "data"

_UNSAFE_CALL = re.compile(r"yaml\.(load|load_all|full_load|full_load_all|unsafe_load|unsafe_load_all)\s*\(")


def _sources() -> list[Path]:
    return sorted((REPO / "screening").rglob("*.py")) + [REPO / "workflow" / "Snakefile"]


def test_every_yaml_load_in_the_code_is_safe():
    """grep: only yaml.safe_load, or yaml.load with the SafeLoader subclass of screening.hosts."""
    offenders = []
    for path in _sources():
        for number, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
            code = line.split("#", 1)[0]
            if _UNSAFE_CALL.search(code) and "Loader=StrictSafeLoader" not in code:
                offenders.append(f"{path.relative_to(REPO)}:{number}: {line.strip()}")
            if re.search(r"yaml\.(Unsafe|Full)?Loader\b|yaml\.(CLoader|CFullLoader|CUnsafeLoader)\b", code):
                offenders.append(f"{path.relative_to(REPO)}:{number}: {line.strip()}")
    assert offenders == []
    # the scan must see the loaders it vouches for, or it proves nothing
    assert any("safe_load" in p.read_text(encoding="utf-8") for p in _sources())


def test_strict_loader_has_only_safe_constructors():
    assert issubclass(hosts.StrictSafeLoader, yaml.SafeLoader)
    tags = set(hosts.StrictSafeLoader.yaml_constructors) | set(hosts.StrictSafeLoader.yaml_multi_constructors)
    assert not [t for t in tags if t and "python" in t]


@pytest.mark.parametrize("loader, fixture", [
    (hosts.load_hosts, "hosts_python_tag.yaml"),
    (pools.load_pool, "pool_python_tag.yaml"),
    (rulesets.load_ruleset, "rules_python_tag.yaml"),
    (scarcity.load_scarcity_rules, "rules_python_tag.yaml"),
])
def test_python_object_tag_is_refused(tmp_path, monkeypatch, loader, fixture):
    monkeypatch.chdir(tmp_path)
    shutil.copy(BAD / fixture, tmp_path / fixture)
    with pytest.raises(ScreeningError) as error:
        loader(tmp_path / fixture)
    message = str(error.value)
    assert str(tmp_path / fixture) in message and "python/object/apply:os.mkdir" in message
    assert not (tmp_path / "pwned-by-yaml").exists()


def test_python_object_tag_through_the_cli(tmp_path, monkeypatch, capsys):
    for name in ("small_rules.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, tmp_path / name)
    shutil.copy(BAD / "hosts_python_tag.yaml", tmp_path / "small_hosts.yaml")
    monkeypatch.chdir(tmp_path)
    code = cli.main(["run", "--rules", str(tmp_path / "small_rules.yaml")])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1 and "is refused: only plain YAML data is read" in err, err
    assert not (tmp_path / "pwned-by-yaml").exists()
    assert not (tmp_path / "results").exists()


# --- nothing escapes the results folder -------------------------------------------------------------

GOOD_HOST = """hosts:
  - id: {id}
    formula: TiO2
    family: rutile
    gap_ev: 3.0
    gap_source: test fixture
    sites:
      - {{label: Ti, element: Ti, oxidation_state: 4, coordination: 6, multiplicity: 1}}
    anion: {{element: O, oxidation_state: -2, coordination: 3, multiplicity: 2}}
"""


@pytest.mark.parametrize("host_id", ["../x", "a/b", "..", ".", "/abs", "a\\b", "x\n", "~user", "a b", "a" * 65])
def test_host_id_that_could_leave_the_results_folder_is_refused(tmp_path, host_id):
    path = tmp_path / "hosts.yaml"
    path.write_text(GOOD_HOST.format(id=json.dumps(host_id)))
    assert yaml.safe_load(path.read_text())["hosts"][0]["id"] == host_id  # the fixture says what we mean
    with pytest.raises(ScreeningError) as error:
        hosts.load_hosts(path)
    assert "field 'id'" in str(error.value)


def test_host_id_pattern_refuses_a_prefix_match():
    # structures.py calls HOST_ID.match(); the pattern must hold for the whole id there too
    for bad in ("a/b", "ok\n", "ok/../../x"):
        assert hosts.HOST_ID.match(bad) is None
    assert hosts.HOST_ID.match("TiO2-rutile") is not None


@pytest.mark.parametrize("name", ["../../etc", "a/b", "..", "/tmp/x", "a\\b"])
def test_rule_set_name_cannot_leave_the_results_folder(tmp_path, monkeypatch, capsys, name):
    for data in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / data, tmp_path / data)
    rules = tmp_path / "small_rules.yaml"
    rules.write_text(rules.read_text().replace("name: small", f"name: {json.dumps(name)}"))
    with pytest.raises(ScreeningError, match="field 'name'"):
        rulesets.load_ruleset(rules)
    work = tmp_path / "work"
    work.mkdir()
    monkeypatch.chdir(work)
    # no --out: the default results/<name>/ is where a bad name would have escaped to
    assert cli.main(["run", "--rules", str(rules)]) == 2
    assert "field 'name'" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        ["small_rules.yaml", "small_hosts.yaml", "small_pool.yaml", "work"])
    assert list(work.iterdir()) == []
