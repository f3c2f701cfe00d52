"""Hosts from CIF files: the same sites as their hand-written twins, bond-valence oxidation
states, multiplicities per formula unit, and bad structures named and skipped.

External references: the site descriptions of candidates/hosts.yaml (Shannon-table
coordinations of the textbook structures: perovskite A XII / B VI, rutile and anatase
Ti VI with O III, wurtzite IV/IV, fluorite Ce VIII with O IV; common practice) and the
textbook oxidation states of the hosts (common practice).
"""
from __future__ import annotations

import shutil
import warnings
from pathlib import Path

import pandas as pd
import pytest

from screening import cli, pipeline, structures
from screening import hosts as hostlib
from screening.errors import ScreeningError

REPO = Path(__file__).resolve().parents[1]
STRUCTURES = REPO / "candidates" / "structures"
LIBRARY = {h.id: h for h in hostlib.load_hosts(REPO / "candidates" / "hosts.yaml")}
TWINS = {"SrTiO3_cubic": "SrTiO3", "TiO2_rutile": "TiO2-rutile", "TiO2_anatase": "TiO2-anatase",
         "ZnO_wurtzite": "ZnO", "SnO2_rutile": "SnO2", "CeO2_fluorite": "CeO2"}
SIDECAR = "family: test\ngap_ev: 3.0\ngap_source: test value, not a measurement\n"


@pytest.fixture(scope="module")
def folder_hosts():
    hosts, skipped = structures.load_structures(STRUCTURES)
    assert skipped == []
    return {h.id: h for h in hosts}


def _sites(host):
    return [(s.label, s.element, s.oxidation_state, s.coordination, s.multiplicity) for s in host.sites]


@pytest.mark.parametrize("stem, twin", sorted(TWINS.items()))
def test_cif_host_gives_the_sites_of_its_hand_written_twin(folder_hosts, stem, twin):
    cif, hand = folder_hosts[stem], LIBRARY[twin]
    assert _sites(cif) == _sites(hand)
    a, b = cif.anion, hand.anion
    assert (a.element, a.oxidation_state, a.coordination, a.multiplicity) == \
        (b.element, b.oxidation_state, b.coordination, b.multiplicity)
    assert cif.composition() == hand.composition()
    assert [s.radius_a for s in cif.sites] == [s.radius_a for s in hand.sites]
    assert (cif.gap_ev, cif.family) == (hand.gap_ev, hand.family)


@pytest.mark.parametrize("stem, states", [
    # textbook oxidation states (common practice): Sr2+ Ti4+ O2-, Ti4+ O2-, Zn2+ O2-, Sn4+ O2-
    ("SrTiO3_cubic", {"Sr": 2, "Ti": 4}), ("TiO2_rutile", {"Ti": 4}), ("ZnO_wurtzite", {"Zn": 2}),
    ("SnO2_rutile", {"Sn": 4})])
def test_bond_valence_oxidation_states_of_library_hosts(folder_hosts, stem, states):
    host = folder_hosts[stem]
    assert host.extra["oxidation_states_from"].startswith("bond valence")
    assert {s.element: s.oxidation_state for s in host.sites} == states
    assert host.anion.oxidation_state == -2


def test_oxidation_states_given_in_the_file_are_used(folder_hosts):
    ceria = folder_hosts["CeO2_fluorite"]
    assert ceria.extra["oxidation_states_from"] == "file"
    assert ceria.sites[0].oxidation_state == 4


def _write(tmp_path: Path, name: str, structure=None, text: str | None = None, sidecar: str | None = SIDECAR):
    from pymatgen.io.cif import CifWriter

    path = tmp_path / f"{name}.cif"
    if text is None:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            text = str(CifWriter(structure))
    path.write_text(text)
    if sidecar is not None:
        path.with_suffix(".yaml").write_text(sidecar)
    return path


def _from_spacegroup(group, a, species, coords):
    from pymatgen.core import Lattice, Structure

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return Structure.from_spacegroup(group, Lattice.cubic(a), species, coords)


def _cubic_p1(a, species, coords):
    """A cubic cell with every atom listed (no symmetry expansion: fast)."""
    from pymatgen.core import Lattice, Structure

    return Structure(Lattice.cubic(a), species, coords)


FCC = [[0, 0, 0], [.5, .5, 0], [.5, 0, .5], [0, .5, .5]]
ROCK_SALT_ANION = [[.5, .5, .5], [0, 0, .5], [0, .5, 0], [.5, 0, 0]]
FLUORITE_ANION = [[x, y, z] for x in (.25, .75) for y in (.25, .75) for z in (.25, .75)]


def test_multiplicities_enlarge_the_formula_unit_where_needed(tmp_path):
    # Bixbyite In2O3, Ia-3, a = 10.117 Å, In 8b (1/4,1/4,1/4), In 24d (x,0,1/4) x = -0.0336,
    # O 48e (0.3905, 0.1529, 0.3832): M. Marezio, Acta Cryst. 20 (1966) 723 (from memory).
    # 8b : 24d = 1 : 3 In per In4O6, both In six-fold (common practice).
    path = _write(tmp_path, "In2O3", _from_spacegroup(
        "Ia-3", 10.117, ["In", "In", "O"], [[.25, .25, .25], [-0.0336, 0, .25], [0.3905, 0.1529, 0.3832]]))
    host = structures.host_from_structure(path)
    assert host.formula == "In4O6"
    assert sorted((s.coordination, s.multiplicity) for s in host.sites) == [(6, 1), (6, 3)]
    assert [s.label for s in host.sites] == ["In1", "In2"]
    assert (host.anion.coordination, host.anion.multiplicity) == (4, 6)


def _bad_files(tmp_path: Path) -> dict[str, tuple[Path, str]]:
    return {
        "corrupt": (_write(tmp_path, "corrupt", text="data_x\n_cell_length_a 3.9\nloop_\n_atom_site_label\nno\n"),
                    "not a readable CIF file"),
        "partial": (_write(tmp_path, "partial", _cubic_p1(
            3.905, [{"Sr": 0.9, "La": 0.1}, "Ti", "O", "O", "O"],
            [[.5, .5, .5], [0, 0, 0], [.5, 0, 0], [0, .5, 0], [0, 0, .5]])), "partial occupancies"),
        # rock-salt NaCl, a = 5.64 Å (common practice)
        "no_oxygen": (_write(tmp_path, "no_oxygen", _cubic_p1(5.64, ["Na"] * 4 + ["Cl"] * 4, FCC + ROCK_SALT_ANION)),
                      "has no oxygen"),
        # a made-up rock-salt "NaO": Na+ and O2- cannot balance, bond valence finds no assignment
        "unassignable": (_write(tmp_path, "unassignable", _cubic_p1(4.2, ["Na"] * 4 + ["O"] * 4,
                                                                     FCC + ROCK_SALT_ANION)), "cannot be assigned"),
        # fluorite CeO2 (a = 5.411 Å) without its sidecar
        "no_sidecar": (_write(tmp_path, "no_sidecar", _cubic_p1(5.411, ["Ce"] * 4 + ["O"] * 8, FCC + FLUORITE_ANION),
                              sidecar=None), "no sidecar"),
    }


def test_bad_structures_raise_naming_the_file_and_the_problem(tmp_path):
    for name, (path, reason) in _bad_files(tmp_path).items():
        with pytest.raises(ScreeningError) as caught:
            structures.host_from_structure(path)
        message = str(caught.value)
        assert str(path) in message and reason in message, (name, message)


def test_folder_skips_bad_structures_and_keeps_the_rest(tmp_path):
    bad = _bad_files(tmp_path)
    shutil.copy(STRUCTURES / "ZnO_wurtzite.cif", tmp_path)
    shutil.copy(STRUCTURES / "ZnO_wurtzite.yaml", tmp_path)
    hosts, skipped = structures.load_structures(tmp_path)
    assert [h.id for h in hosts] == ["ZnO_wurtzite"]
    reasons = {s["host"]: s["reason"] for s in skipped}
    assert set(reasons) == {f"{name}.cif" for name in bad}
    for name, (_, reason) in bad.items():
        assert reason in reasons[f"{name}.cif"]


def test_whole_folder_screen_records_skipped_hosts_in_the_funnel(tmp_path):
    # the stage functions the workflow runs, with a folder of one good and one corrupt structure
    folder = tmp_path / "structures"
    folder.mkdir()
    for suffix in (".cif", ".yaml"):
        shutil.copy(STRUCTURES / f"TiO2_rutile{suffix}", folder)
    _write(folder, "broken", text="not a CIF at all\n")
    pool = tmp_path / "pool.yaml"
    pool.write_text("name: p\nelements: [Cr, Nb]\n")
    hosts_json = tmp_path / "hosts.json"
    pipeline.prepare_hosts(REPO / "tests" / "data" / "small_hosts.yaml", 8, hosts_json, structures=folder)
    from screening import rulesets

    rules = rulesets.validate_document({"name": "t", "hosts": "h", "dopant_pool": "p"}, "test")
    out = {k: tmp_path / f"{k}.{ext}" for k, ext in (("kept", "parquet"), ("rejected", "parquet"),
                                                      ("funnel", "csv"))}
    kept = pipeline.screen_shard(hosts_json, 0, pool, rules["enumeration"], rules["filters"], rules["scarcity"],
                                 out["kept"], out["rejected"], out["funnel"])
    funnel = pd.read_csv(out["funnel"])
    row = funnel[funnel["rule"] == "structure"]
    assert list(row["host"]) == ["broken.cif"] and int(row["enumerated"].iloc[0]) == 0
    rejected = pd.read_parquet(out["rejected"])
    reason = rejected[rejected["rule"] == "structure"]
    assert len(reason) == 1 and reason["detail"].iloc[0].startswith("not a readable CIF file")
    # nothing else is lost: the good structure's host and the library's hosts are all screened
    assert {"TiO2_rutile", "SrTiO3", "TiO2-rutile", "NaTaO3"} <= set(funnel["host"])
    assert "TiO2_rutile/Cr3+@Ti+Nb5+@Ti" in set(kept["candidate_id"])


def test_cli_stops_with_exit_2_on_a_bad_single_structure(tmp_path, capsys):
    for name in ("small_rules.yaml", "small_hosts.yaml", "small_pool.yaml"):
        shutil.copy(REPO / "tests" / "data" / name, tmp_path / name)
    path, _ = _bad_files(tmp_path)["partial"]
    rules = tmp_path / "small_rules.yaml"
    rules.write_text(rules.read_text() + f"structures: {path.name}\n")
    assert cli.main(["run", "--rules", str(rules), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert "partial.cif" in err and "partial occupancies" in err


def test_host_id_in_library_and_structures_is_refused(tmp_path):
    shutil.copy(STRUCTURES / "ZnO_wurtzite.cif", tmp_path / "ZnO.cif")
    (tmp_path / "ZnO.yaml").write_text(SIDECAR)
    library = tmp_path / "lib.yaml"
    shutil.copy(REPO / "candidates" / "hosts.yaml", library)
    with pytest.raises(ScreeningError, match="ZnO are in the host library"):
        structures.combined_hosts(library, tmp_path / "ZnO.cif")
