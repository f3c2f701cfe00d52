"""Bad input of every kind ends in one line on stderr naming file, entry and field, exit status 2.

Issue 9, item 1 (and the bad-input section of issue 2).  Every case goes through the command-line
entry point ``screening.cli.main`` as a user would meet it, and checks four things:

* the exit status is 2 (the convention of argparse and of Unix tools for a usage error, common practice);
* stderr holds exactly one line, ``screening: error: ...``, naming the file, the entry and the field;
* no traceback;
* nothing is written under the results folder (``--out`` must not even be created).

The workflow is never run: ``screening run`` starts its Snakemake process before the checks (it only
imports Snakemake until handed its arguments, see screening.snakemake_main), and here that process is a
stand-in that fails the test when handed arguments (fixture ``no_workflow_release``); ``subprocess.run``
and ``subprocess.Popen`` fail the test too.  A validation gap shows up as a clear failure instead of a
30-second Snakemake run.
"""
from __future__ import annotations

import copy
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

from screening import cli

DATA = Path(__file__).resolve().parent / "data"
BAD = DATA / "bad"


# --- helpers ----------------------------------------------------------------------------------

@pytest.fixture
def screen_dir(tmp_path, monkeypatch, no_workflow_release):
    """A writable copy of the small screen; cwd is tmp_path so a stray 'results/' would show up there."""
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, tmp_path / name)
    monkeypatch.chdir(tmp_path)

    def no_workflow(*args, **kwargs):
        raise AssertionError(f"validation let bad input through: the workflow was started with {args[:1]}")

    monkeypatch.setattr(subprocess, "run", no_workflow)
    monkeypatch.setattr(subprocess, "Popen", no_workflow)
    return tmp_path


def _load(path: Path):
    return yaml.safe_load(path.read_text(encoding="utf-8"))


def _dump(document, path: Path) -> Path:
    path.write_text(yaml.safe_dump(document, allow_unicode=True, sort_keys=False), encoding="utf-8")
    return path


def _run_cli(argv, capsys) -> tuple[int, str]:
    code = cli.main(argv)
    captured = capsys.readouterr()
    return code, captured.err


def _assert_one_line_error(code: int, err: str, *must_contain: str) -> str:
    assert code == 2, f"exit status {code}, stderr {err!r}"
    lines = err.strip("\n").split("\n")
    assert len(lines) == 1, f"expected one line on stderr, got {len(lines)}: {err!r}"
    assert lines[0].startswith("screening: error: "), lines[0]
    assert "Traceback" not in err
    for text in must_contain:
        assert text in lines[0], f"{text!r} missing from {lines[0]!r}"
    return lines[0]


def _run_screen(screen_dir: Path, capsys, rules: Path | None = None) -> tuple[int, str]:
    out = screen_dir / "results" / "out"
    code, err = _run_cli(["run", "--rules", str(rules or screen_dir / "small_rules.yaml"),
                          "--out", str(out), "--cores", "1"], capsys)
    # nothing under the results folder, nor a default results/<name>/ in the working directory
    assert not (screen_dir / "results").exists(), sorted(p.name for p in (screen_dir / "results").rglob("*"))
    return code, err


# --- host libraries -------------------------------------------------------------------------------

def _host(document, host_id):
    return next(h for h in document["hosts"] if h["id"] == host_id)


HOST_CASES = {
    # case: (change to the parsed small_hosts.yaml, entry named, field named, words in the message)
    "missing field": (lambda d: _host(d, "TiO2-rutile").pop("gap_source"), "TiO2-rutile", "gap_source", "missing"),
    "missing site field": (lambda d: _host(d, "NaTaO3")["sites"][1].pop("multiplicity"), "NaTaO3", "sites[1]",
                           "missing 'multiplicity'"),
    "unknown element": (lambda d: _host(d, "SrTiO3")["sites"][1].update(element="Tx"), "SrTiO3",
                        "sites[1].element", "unknown element 'Tx'"),
    # Ti takes no +7 state: mendeleev's oxidationstates table lists at most +4 for Ti
    "impossible oxidation state": (lambda d: _host(d, "TiO2-rutile")["sites"][0].update(oxidation_state=7),
                                   "TiO2-rutile", "sites[0].oxidation_state", "does not take"),
    "oxidation state as text": (lambda d: _host(d, "TiO2-rutile")["sites"][0].update(oxidation_state="4+"),
                                "TiO2-rutile", "sites[0].oxidation_state", "integer"),
    # Na+ Ta4+ O2-3: +1 + 4 - 6 = -1 per formula unit
    "non-neutral host": (lambda d: _host(d, "NaTaO3")["sites"][1].update(oxidation_state=4), "NaTaO3", "sites",
                         "not neutral"),
    # Shannon (1976) lists Ti4+ at IV, V, VI and VIII only, so XII is outside the radius table
    "coordination outside the radius table": (lambda d: _host(d, "TiO2-rutile")["sites"][0].update(coordination=12),
                                              "TiO2-rutile", "sites[0].coordination", "no Shannon radius"),
    # O2- is tabulated at II, III, IV, VI and VIII (Shannon 1976), not IX
    "anion coordination outside the radius table": (lambda d: _host(d, "TiO2-rutile")["anion"].update(coordination=9),
                                                    "TiO2-rutile", "anion.coordination", "no Shannon radius"),
    "duplicate host id": (lambda d: d["hosts"].append(copy.deepcopy(_host(d, "NaTaO3"))), "NaTaO3", "id",
                          "duplicate host id"),
    "ids equal but for case": (lambda d: d["hosts"].append(dict(copy.deepcopy(_host(d, "NaTaO3")), id="natao3")),
                               "natao3", "id", "duplicate host id"),
    "id with a path separator": (lambda d: _host(d, "NaTaO3").update(id="a/b"), "a/b", "id", "no path separators"),
    "id climbing out with ..": (lambda d: _host(d, "NaTaO3").update(id="../x"), "../x", "id", "no path separators"),
    "id that is ..": (lambda d: _host(d, "NaTaO3").update(id=".."), "..", "id", "letters, digits"),
    "id with a backslash": (lambda d: _host(d, "NaTaO3").update(id="a\\b"), "a\\\\b", "id", "letters, digits"),
    "id with a trailing newline": (lambda d: _host(d, "NaTaO3").update(id="NaTaO3\n"), "NaTaO3\\n", "id",
                                   "letters, digits"),
    "id that is a number": (lambda d: _host(d, "NaTaO3").update(id=7), "7", "id", "must be text"),
    "gap with a unit": (lambda d: _host(d, "SrTiO3").update(gap_ev="3.25 eV"), "SrTiO3", "gap_ev", "band gap in eV"),
    "formula with Unicode subscripts": (lambda d: _host(d, "SrTiO3").update(formula="SrTiO₃"), "SrTiO3", "formula",
                                        "Unicode subscript"),
    "family not text": (lambda d: _host(d, "SrTiO3").update(family=["perovskite"]), "SrTiO3", "family",
                        "must be text"),
    "unknown site key": (lambda d: _host(d, "SrTiO3")["sites"][0].update(charge=2), "SrTiO3", "sites[0]",
                         "unknown key(s) charge"),
}


@pytest.mark.parametrize("case", sorted(HOST_CASES))
def test_bad_host_entry(screen_dir, capsys, case):
    change, entry, field, words = HOST_CASES[case]
    hosts = screen_dir / "small_hosts.yaml"
    document = _load(hosts)
    change(document)
    _dump(document, hosts)
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(hosts), f"entry '{entry}'", f"field '{field}'", words)


def test_host_yaml_syntax_error_names_file_and_line(screen_dir, capsys):
    shutil.copy(BAD / "hosts_syntax_error.yaml", screen_dir / "small_hosts.yaml")
    code, err = _run_screen(screen_dir, capsys)
    # the unclosed '[' opens on line 10 of the fixture; PyYAML reports where the parse broke down
    _assert_one_line_error(code, err, str(screen_dir / "small_hosts.yaml"), "not valid YAML at line")


def test_host_key_repeated_in_one_entry(screen_dir, capsys):
    # Plain YAML keeps the last of two equal keys silently; a hand-edited entry with two
    # oxidation states must not be screened with whichever came last.
    hosts = screen_dir / "small_hosts.yaml"
    text = hosts.read_text().replace("oxidation_state: 5, coordination: 6",
                                     "oxidation_state: 5, oxidation_state: 4, coordination: 6")
    hosts.write_text(text)
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(hosts), "'oxidation_state' appears twice")


def test_host_file_not_utf8(screen_dir, capsys):
    hosts = screen_dir / "small_hosts.yaml"
    hosts.write_bytes(b"hosts:\n  - id: \xff\xfe\n")
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(hosts), "UTF-8")


# --- dopant pools -----------------------------------------------------------------------------------

POOL_CASES = {
    "unknown element": ("elements: [Cr, Qq]\n", "elements[1]", "unknown element 'Qq'"),
    # YAML 1.1 reads an unquoted No (nobelium) as false
    "element read as a boolean": ("elements: [Cr, No]\n", "elements[1]", "quote the symbol"),
    # helium has no oxidation state in mendeleev's oxidationstates table
    "element with no ion": ("elements: [Cr, He]\n", "elements[1]", "no oxidation state"),
    "repeated element": ("elements: [Cr, Nb, Cr]\n", "elements", "repeated element(s) Cr"),
    "empty list": ("elements: []\n", "elements", "non-empty list"),
}


@pytest.mark.parametrize("case", sorted(POOL_CASES))
def test_bad_pool(screen_dir, capsys, case):
    text, field, words = POOL_CASES[case]
    pool = screen_dir / "small_pool.yaml"
    pool.write_text("name: bad-pool\n" + text)
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(pool), f"field '{field}'", words)


# --- rule sets ------------------------------------------------------------------------------------

RULE_CASES = {
    "unknown key": (lambda d: d["filters"]["radius_mismatch"].update(max_rel=0.1), "filters.radius_mismatch",
                    "unknown key(s) max_rel"),
    "unknown top-level key": (lambda d: d.update(host="small_hosts.yaml"), None, "unknown key(s) host"),
    "wrong type": (lambda d: d["filters"]["radius_mismatch"].update(max_relative="15 %"),
                   "filters.radius_mismatch.max_relative", "not allowed"),
    "wrong type of section": (lambda d: d.update(scarcity=[0.5]), "scarcity", "not allowed"),
    "negative threshold": (lambda d: d["scarcity"].update(min_crust_ppm=-1), "scarcity.min_crust_ppm", ">= 0"),
    "negative overpotential": (lambda d: d["alignment"].update(her_overpotential_v=-0.1),
                               "alignment.her_overpotential_v", ">= 0"),
    "negative cost ceiling": (lambda d: d["scarcity"].update(max_cost_usd_per_kg=-5),
                              "scarcity.max_cost_usd_per_kg", "> 0"),
    # the only lower/upper pair of the schema: the Goldschmidt tolerance window
    "min above max": (lambda d: d["filters"].update(lattice={"tolerance": {"min": 1.2, "max": 0.9}}),
                      "filters.lattice.tolerance.min", "above"),
    "missing host file": (lambda d: d.update(hosts="no_such_hosts.yaml"), "hosts", "not a file"),
    "missing pool file": (lambda d: d.update(dopant_pool="no_such_pool.yaml"), "dopant_pool", "not a file"),
    "name climbing out of results": (lambda d: d.update(name="../../etc"), "name", "not allowed"),
    "name with a path separator": (lambda d: d.update(name="a/b"), "name", "not allowed"),
}


@pytest.mark.parametrize("case", sorted(RULE_CASES))
def test_bad_rule_set(screen_dir, capsys, case):
    change, field, words = RULE_CASES[case]
    rules = screen_dir / "small_rules.yaml"
    document = _load(rules)
    change(document)
    _dump(document, rules)
    code, err = _run_screen(screen_dir, capsys)
    must = [str(rules), words] + ([f"field '{field}'"] if field else [])
    _assert_one_line_error(code, err, *must)


def test_rule_set_missing_required_key(screen_dir, capsys):
    rules = screen_dir / "small_rules.yaml"
    document = _load(rules)
    del document["dopant_pool"]
    _dump(document, rules)
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(rules), "dopant_pool")


def test_rule_set_file_missing(screen_dir, capsys):
    code, err = _run_screen(screen_dir, capsys, rules=screen_dir / "absent.yaml")
    _assert_one_line_error(code, err, str(screen_dir / "absent.yaml"), "not found")


# Gaps once found in screening/rulesets.py and since fixed: NaN thresholds, repeated keys, a name
# with a trailing newline.

def test_rule_set_nan_threshold_is_refused(screen_dir, capsys):
    rules = screen_dir / "small_rules.yaml"
    rules.write_text(rules.read_text().replace("max_relative: 0.15", "max_relative: .nan"))
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(rules), "filters.radius_mismatch.max_relative")


def test_rule_set_repeated_key_is_refused(screen_dir, capsys):
    rules = screen_dir / "small_rules.yaml"
    rules.write_text(rules.read_text().replace("max_relative: 0.15", "max_relative: 0.15\n    max_relative: 0.5"))
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(rules), "max_relative")


def test_rule_set_name_with_newline_is_refused(screen_dir, capsys):
    rules = screen_dir / "small_rules.yaml"
    rules.write_text(rules.read_text().replace("name: small", 'name: "small\\n"'))
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(rules), "field 'name'")


# --- formulas given to `edges` and `audit` ---------------------------------------------------------

FORMULA_CASES = {
    "empty": ("", "empty formula"),
    "blank": ("   ", "empty formula"),
    "garbage": ("garbage", "cannot read"),
    "negative amount": ("TiO-2", "sign '-'"),
    "negative amount before an element": ("Ti-1O2", "sign '-'"),
    "zero amount": ("TiO0", "zero amount"),
    "zero amount written as a decimal": ("Ti0.0O2", "zero amount"),
    "unknown symbol": ("XxO2", "unknown element symbol 'Xx'"),
    "deuterium is not an element symbol": ("D2O", "unknown element symbol 'D'"),
    "Unicode subscripts": ("TiO₂", "Unicode subscript"),
    "Unicode superscript": ("TiO²", "cannot read"),
    # Arabic-Indic three: \d matched it and Fraction read it as 3 before the fix
    "non-ASCII digit": ("Ti٣O2", "cannot read"),
    "unbalanced parenthesis": ("Sr(TiO3", "unbalanced"),
    "amount before any element": ("2TiO2", "without an element"),
    "absurd amount": ("TiO" + "9" * 30, "above 1000"),
}


@pytest.mark.parametrize("command", ["edges", "audit"])
@pytest.mark.parametrize("case", sorted(FORMULA_CASES))
def test_bad_formula(screen_dir, capsys, command, case):
    formula, words = FORMULA_CASES[case]
    argv = ["edges", formula, "--gap", "3.0"] if command == "edges" else ["audit", formula]
    before = sorted(p.name for p in screen_dir.iterdir())
    code, err = _run_cli(argv, capsys)
    _assert_one_line_error(code, err, words)
    assert sorted(p.name for p in screen_dir.iterdir()) == before  # nothing written


def test_bad_formula_in_a_shortlist_names_file_and_line(screen_dir, capsys):
    shortlist = screen_dir / "mine.csv"
    shortlist.write_text("host,formula\nSrTiO3,SrTi0.98Rh0.02O3\nTiO2-rutile,TiO-2\n")
    code, err = _run_cli(["audit", str(shortlist)], capsys)
    _assert_one_line_error(code, err, str(shortlist), "line 3", "sign '-'")


# --- through a real process: exit status and no traceback -------------------------------------------

def _subprocess(argv, cwd):
    return subprocess.run([sys.executable, "-m", "screening", *argv], cwd=cwd, capture_output=True, text=True,
                          timeout=120)


def test_subprocess_bad_host_exits_2_without_traceback(tmp_path):
    for name in ("small_rules.yaml", "small_pool.yaml"):
        shutil.copy(DATA / name, tmp_path / name)
    shutil.copy(BAD / "hosts_syntax_error.yaml", tmp_path / "small_hosts.yaml")
    done = _subprocess(["run", "--rules", str(tmp_path / "small_rules.yaml")], tmp_path)
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    assert done.stderr.strip().count("\n") == 0 and "small_hosts.yaml" in done.stderr, done.stderr
    assert done.stdout == ""
    assert not (tmp_path / "results").exists()


def test_subprocess_bad_formula_exits_2_without_traceback(tmp_path):
    done = _subprocess(["edges", "TiO₂", "--gap", "3.0"], tmp_path)
    assert done.returncode == 2, done.stderr
    assert "Traceback" not in done.stderr
    assert done.stderr.strip() == ("screening: error: formula: 'TiO₂' uses Unicode subscript digits; "
                                   "write plain digits, e.g. TiO2")
    assert list(tmp_path.iterdir()) == []


def test_rule_set_nested_too_deeply(screen_dir, capsys):
    rules = screen_dir / "small_rules.yaml"
    rules.write_text("name: " + "[" * 1000 + "]" * 1000 + "\n")
    code, err = _run_screen(screen_dir, capsys)
    _assert_one_line_error(code, err, str(rules), "nested")
