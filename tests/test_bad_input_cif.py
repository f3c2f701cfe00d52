"""Bad CIF files: one line naming the file and the fault, exit status 2, nothing under the results folder.

Internal behaviour of the tool only: no published value is checked here.

Issue 9, item 1 (CIF part).  The loader is the lattice engineer's ``screening.structures``
(``host_from_structure`` reads one CIF and its sidecar YAML); a rule set names a CIF with the key
``structures``.  The fixtures in ``tests/data/bad/`` derive from ``candidates/structures/TiO2_rutile.cif``
(see each file's header) and come with a valid sidecar, so that only the structure is at fault:

* ``cif_corrupt.cif``: the first third of the file, then garbage (a copy cut short);
* ``cif_partial_occupancy.cif``: the Ti site as Ti0.5Sn0.5 (a disordered solid solution);
* ``cif_no_oxygen.cif``: O replaced by S (TiS2 in the rutile frame).
"""
from __future__ import annotations

import shutil
import subprocess
from pathlib import Path

import pytest

from screening import cli
from screening.errors import ScreeningError

structures = pytest.importorskip("screening.structures")

DATA = Path(__file__).resolve().parent / "data"
BAD = DATA / "bad"

CASES = {
    "corrupt": ("cif_corrupt.cif", "not a readable CIF file"),
    "partial occupancy": ("cif_partial_occupancy.cif", "partial occupancies"),
    "no oxygen": ("cif_no_oxygen.cif", "has no oxygen"),
}


def _copy_case(name: str, directory: Path) -> Path:
    shutil.copy(BAD / name, directory / name)
    shutil.copy(BAD / name.replace(".cif", ".yaml"), directory / name.replace(".cif", ".yaml"))
    return directory / name


@pytest.mark.parametrize("case", sorted(CASES))
def test_loader_refuses_bad_cif(tmp_path, case):
    name, words = CASES[case]
    path = _copy_case(name, tmp_path)
    with pytest.raises(ScreeningError) as error:
        structures.host_from_structure(path)
    message = str(error.value)
    assert str(path) in message and words in message
    assert "\n" not in message


@pytest.mark.parametrize("case", sorted(CASES))
def test_screen_with_bad_cif_stops_with_one_line(tmp_path, monkeypatch, capsys, case, no_workflow_release):
    name, words = CASES[case]
    for data in ("small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(DATA / data, tmp_path / data)
    path = _copy_case(name, tmp_path)
    rules = tmp_path / "small_rules.yaml"
    rules.write_text((DATA / "small_rules.yaml").read_text().replace(
        "hosts: small_hosts.yaml", f"hosts: small_hosts.yaml\nstructures: {name}"))
    monkeypatch.chdir(tmp_path)

    def no_workflow(*args, **kwargs):
        raise AssertionError("validation let a bad CIF through: the workflow was started")

    monkeypatch.setattr(subprocess, "run", no_workflow)
    monkeypatch.setattr(subprocess, "Popen", no_workflow)
    code = cli.main(["run", "--rules", str(rules), "--out", str(tmp_path / "results" / "out")])
    err = capsys.readouterr().err
    assert code == 2, err
    lines = err.strip("\n").split("\n")
    assert len(lines) == 1 and lines[0].startswith("screening: error: "), err
    assert str(path) in lines[0] and words in lines[0]
    assert "Traceback" not in err
    assert not (tmp_path / "results").exists()
    # the Snakemake process started ahead of the checks was ended unused
    assert len(no_workflow_release) == 1 and no_workflow_release[0].discarded
