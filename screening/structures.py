"""Hosts from crystal structures (CIF files), turned into the same Host records as the host library.

Methods and sources
-------------------
* Reading: pymatgen's ``CifParser`` (S. P. Ong et al., Comput. Mater. Sci. 68 (2013) 314).
* Oxidation states: those the file gives (``_atom_type_oxidation_number``); where it
  gives none, the bond-valence analysis of pymatgen's ``BVAnalyzer`` (bond-valence
  parameters of I. D. Brown and D. Altermatt, Acta Cryst. B41 (1985) 244, and
  O'Keeffe & Brese, J. Am. Chem. Soc. 113 (1991) 3226, with the ICSD-based
  oxidation-state priors pymatgen ships).
* Coordination: pymatgen's ``CrystalNN`` (H. Pan et al., Inorg. Chem. 60 (2021) 1590)
  restricted to cation-anion neighbours, counting the O neighbours of every
  symmetry-distinct cation site.  The oxide ion's coordination is the number of
  cation-O bonds that end on it, so that cation-side and anion-side bond counts
  agree (the convention of ``candidates/hosts.yaml``: O in an ABO3 perovskite is
  6-fold, 2 B + 4 A).  Where the structure has several O sites of different
  coordination, the one held by most O per formula unit is given (ties: the
  higher), and the others are listed in ``extra['anion_coordinations']``.
* Symmetry-distinct sites and their multiplicities: pymatgen's
  ``SpacegroupAnalyzer(...).get_symmetrized_structure()`` (spglib, A. Togo).
  Multiplicity per formula unit = orbit size / formula units in the cell; where
  that is not an integer for every site the formula unit is enlarged until it is
  (bixbyite In2O3 -> In4O6).

A structure comes with a sidecar YAML file of the same name (``SrTiO3_cubic.cif`` +
``SrTiO3_cubic.yaml``) holding what a structure does not say: ``gap_ev`` (measured
gap, eV), ``gap_source``, ``family``, and optionally ``id`` (default: the file
name), ``name``, ``gap_type``, ``notes``.

Bad input (a file pymatgen cannot read, partial occupancies, no oxygen, another
anion, oxidation states that cannot be assigned, a site without a tabulated
Shannon radius at its coordination, a missing or bad sidecar) raises
:class:`ScreeningError` naming the file and what is wrong.  A rule set's
``structures`` key names one CIF file (every problem stops the screen) or a
folder of them (a bad structure is skipped and the reason recorded; the funnel
gets a row with rule ``structure``, rejected.parquet the reason).
"""
from __future__ import annotations

import math
import warnings
from collections import Counter
from fractions import Fraction
from pathlib import Path

import pandas as pd
import yaml

from screening import ions
from screening.errors import ScreeningError
from screening.hosts import HOST_ID, Host, Site, load_hosts

RULE = "structure"
_SIDECAR_FIELDS = {"id", "name", "family", "gap_ev", "gap_type", "gap_source", "notes"}
_SIDECAR_REQUIRED = ("family", "gap_ev", "gap_source")


def _read_cif(path: Path):
    from pymatgen.io.cif import CifParser

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            parser = CifParser(str(path), occupancy_tolerance=1.0)
            structures = parser.parse_structures(primitive=False)
    except Exception as exc:  # pymatgen raises many types for a bad file; all mean "cannot read"
        raise ScreeningError(f"not a readable CIF file ({type(exc).__name__}: {exc})", source=str(path)) from None
    if not structures:
        raise ScreeningError("not a readable CIF file (no structure in it)", source=str(path))
    if len(structures) > 1:
        raise ScreeningError(f"holds {len(structures)} structures; give one structure per file", source=str(path))
    return structures[0]


def _oxidation_states(structure, source: str):
    """The structure decorated with integer oxidation states, and where they come from."""
    from pymatgen.analysis.bond_valence import BVAnalyzer
    from pymatgen.core import Species

    if all(isinstance(sp, Species) and sp.oxi_state is not None for sp in structure.species):
        states = [sp.oxi_state for sp in structure.species]
        if any(float(q) != round(float(q)) for q in states):
            raise ScreeningError("oxidation states in the file are not integers "
                                 f"({sorted({str(sp) for sp in structure.species})})", source=source)
        return structure, "file"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            decorated = BVAnalyzer().get_oxi_state_decorated_structure(structure.remove_oxidation_states())
    except ValueError as exc:
        raise ScreeningError(f"oxidation states cannot be assigned by bond valence ({exc})", source=source) from None
    return decorated, "bond valence (pymatgen BVAnalyzer)"


def _sidecar(path: Path) -> dict:
    side = path.with_suffix(".yaml")
    source = str(side)
    if not side.is_file():
        raise ScreeningError(f"no sidecar file {side.name} with gap_ev, gap_source and family beside the structure",
                             source=str(path))
    try:
        raw = yaml.safe_load(side.read_text(encoding="utf-8"))
    except (yaml.YAMLError, UnicodeDecodeError) as exc:
        raise ScreeningError(f"not valid YAML ({exc})", source=source) from None
    if not isinstance(raw, dict):
        raise ScreeningError("must be a mapping with " + ", ".join(_SIDECAR_REQUIRED), source=source)
    unknown = set(raw) - _SIDECAR_FIELDS
    if unknown:
        raise ScreeningError(f"unknown key(s) {', '.join(sorted(map(str, unknown)))}; allowed: "
                             + ", ".join(sorted(_SIDECAR_FIELDS)), source=source)
    for key in _SIDECAR_REQUIRED:
        if raw.get(key) in (None, ""):
            raise ScreeningError("missing", source=source, field=key)
    gap = raw["gap_ev"]
    if isinstance(gap, bool) or not isinstance(gap, (int, float)) or not 0.1 <= gap <= 12:
        raise ScreeningError(f"must be a band gap in eV from 0.1 to 12, got {gap!r}", source=source, field="gap_ev")
    host_id = raw.get("id", path.stem)
    if not isinstance(host_id, str) or not HOST_ID.match(host_id):
        raise ScreeningError(f"host id {host_id!r} may hold only letters, digits, '-' and '_'"
                             + ("" if "id" in raw else " (name the file so, or give 'id' in the sidecar)"),
                             source=source, field="id")
    return {**raw, "id": host_id}


def _formula_text(amounts: dict[str, int], order: list[str]) -> str:
    return "".join(f"{e}{amounts[e] if amounts[e] != 1 else ''}" for e in order)


def _coordinations(symmetrized, cation_orbits, anion_orbits, anion_symbol: str):
    """O-neighbour count of each cation orbit and cation-neighbour count of each anion orbit.

    Only one representative per cation orbit is analysed: by symmetry every member
    has the same neighbours, so the bonds from orbit i to anion orbit k number
    size_i x (bonds of the representative to k), and anion orbit k's coordination
    is their sum over i divided by size_k.
    """
    from pymatgen.analysis.local_env import CrystalNN

    finder = CrystalNN(cation_anion=True)
    orbit_of = {j: k for k, indices in enumerate(symmetrized.equivalent_indices) for j in indices}
    cation_cn, bonds_to = {}, Counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for index, size in cation_orbits:
            neighbours = [n for n in finder.get_nn_info(symmetrized, index)
                          if n["site"].specie.symbol == anion_symbol]
            cation_cn[index] = len(neighbours)
            for n in neighbours:
                bonds_to[orbit_of[n["site_index"]]] += size
    anion_cn = {}
    for index, size in anion_orbits:
        bonds = bonds_to[orbit_of[index]]
        anion_cn[index] = bonds // size if bonds % size == 0 else round(bonds / size)
    return cation_cn, anion_cn


def host_from_structure(path: str | Path) -> Host:
    """One Host from one CIF file and its sidecar; raises ScreeningError naming the file."""
    from pymatgen.core import Element
    from pymatgen.symmetry.analyzer import SpacegroupAnalyzer

    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError("structure file not found", source=source)
    meta = _sidecar(path)
    structure = _read_cif(path)
    if not structure.is_ordered:
        disordered = sorted({site.species.formula for site in structure if not site.is_ordered})
        raise ScreeningError("has partial occupancies (" + ", ".join(disordered)
                             + "); the screen needs an ordered structure", source=source)
    if "O" not in {e.symbol for e in structure.composition.elements}:
        raise ScreeningError(f"has no oxygen ({structure.composition.reduced_formula}); the screen handles oxides",
                             source=source)
    structure, oxidation_source = _oxidation_states(structure, source)
    anions = sorted({sp.symbol for sp in structure.species if sp.oxi_state < 0})
    if anions != ["O"]:
        raise ScreeningError(f"anions {', '.join(anions)}: the screen handles oxides with O2- as the only anion",
                             source=source)
    if any(sp.oxi_state == 0 for sp in structure.species):
        raise ScreeningError("a site has oxidation state 0", source=source)

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        symmetrized = SpacegroupAnalyzer(structure, symprec=0.01).get_symmetrized_structure()
    orbits = [(indices[0], len(indices)) for indices in symmetrized.equivalent_indices]
    species = [symmetrized[i].specie for i, _ in orbits]
    cation_orbits = [(i, n) for (i, n), sp in zip(orbits, species) if sp.oxi_state > 0]
    anion_orbits = [(i, n) for (i, n), sp in zip(orbits, species) if sp.oxi_state < 0]
    cation_cn, anion_orbit_cn = _coordinations(symmetrized, cation_orbits, anion_orbits, "O")

    _, z = symmetrized.composition.get_reduced_composition_and_factor()
    per_fu = [Fraction(n, int(round(z))) for _, n in orbits]
    scale = math.lcm(*(f.denominator for f in per_fu))
    units = int(round(z)) // scale if int(round(z)) % scale == 0 else None
    if units is None:
        raise ScreeningError("site multiplicities do not divide into formula units", source=source)

    # cations in order of electronegativity, as formulas are written (Sr before Ti)
    order = sorted({symmetrized[i].specie.symbol for i, _ in cation_orbits}, key=lambda e: (Element(e).X, e))
    by_element: dict[str, list[tuple[int, int]]] = {}
    for i, n in cation_orbits:
        by_element.setdefault(symmetrized[i].specie.symbol, []).append((i, n))
    site_rows = []
    for element in order:
        for k, (i, n) in enumerate(by_element[element]):
            label = element if len(by_element[element]) == 1 else f"{element}{k + 1}"
            site_rows.append({"label": label, "element": element,
                              "charge": int(round(symmetrized[i].specie.oxi_state)),
                              "coordination": int(cation_cn[i]), "multiplicity": n // units})
    anion_cn = Counter()
    anion_detail = []
    for i, n in anion_orbits:
        cn = int(anion_orbit_cn[i])
        anion_cn[cn] += n // units
        anion_detail.append({"coordination": cn, "multiplicity": n // units})
    anion_coordination = max(anion_cn, key=lambda cn: (anion_cn[cn], cn))
    anion_row = {"label": "O", "element": "O", "charge": -2, "coordination": anion_coordination,
                 "multiplicity": sum(anion_cn.values())}
    if any(r["coordination"] == 0 for r in site_rows) or anion_coordination == 0:
        raise ScreeningError("a site has no cation-oxygen neighbours (the local-environment method found none)",
                             source=source)

    rows = pd.DataFrame(site_rows + [anion_row])
    for row in rows.itertuples():
        states = set(ions.oxidation_states(row.element)["charge"])
        if row.charge not in states:
            raise ScreeningError(f"{ions.ion_label(row.element, row.charge)} is not an oxidation state mendeleev "
                                 f"lists for {row.element}", source=source)
    radii = ions.lookup_radii(rows[["element", "charge", "coordination"]])
    lacking = radii[radii["radius_a"].isna() | radii["radius_estimated"]]
    if not lacking.empty:
        row = lacking.iloc[0]
        raise ScreeningError(f"{ions.ion_label(row['element'], row['charge'])} at coordination "
                             f"{row['coordination']} (from the structure) has no tabulated Shannon radius",
                             source=source)
    rows["radius_a"] = radii["radius_a"].to_numpy()
    net = int((rows["charge"] * rows["multiplicity"]).sum())
    if net != 0:
        raise ScreeningError(f"oxidation states do not balance: {net:+d} per formula unit", source=source)

    def site(r) -> Site:
        return Site(r.label, r.element, int(r.charge), int(r.coordination), int(r.multiplicity),
                    float(r.radius_a), False)

    all_rows = list(rows.itertuples())
    amounts: dict[str, int] = {}
    for r in all_rows:
        amounts[r.element] = amounts.get(r.element, 0) + int(r.multiplicity)
    formula = _formula_text(amounts, order + ["O"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        space_group = SpacegroupAnalyzer(structure, symprec=0.01).get_space_group_symbol()
    extra = {"structure_file": str(path), "space_group": space_group, "oxidation_states_from": oxidation_source,
             "structure_source": f"{path.name} ({space_group}); sites by CrystalNN and spglib"}
    if len(anion_detail) > 1:
        extra["anion_coordinations"] = anion_detail
    extra.update({k: meta[k] for k in ("gap_type", "notes") if k in meta})
    return Host(meta["id"], formula, str(meta["family"]), float(meta["gap_ev"]), str(meta["gap_source"]),
                tuple(site(r) for r in all_rows[:-1]), site(all_rows[-1]), str(meta.get("name", "")), extra)


def load_structures(path: str | Path) -> tuple[list[Host], list[dict]]:
    """Hosts from one CIF file or every ``*.cif`` in a folder (sorted by name).

    Returns (hosts, skipped).  A single file raises on any problem.  In a folder a
    bad structure is skipped: ``skipped`` holds one ``{"host", "file", "reason"}``
    per skipped file and every good structure is kept.  A missing path, an empty
    folder or two structures with one host id raise.
    """
    path = Path(path)
    if path.is_file():
        return [host_from_structure(path)], []
    if not path.is_dir():
        raise ScreeningError("structures path is neither a CIF file nor a folder", source=str(path))
    files = sorted(path.glob("*.cif"))
    if not files:
        raise ScreeningError("folder holds no *.cif file", source=str(path))
    hosts, skipped = [], []
    for file in files:
        try:
            hosts.append(host_from_structure(file))
        except ScreeningError as exc:
            # a whole-folder screen goes on without this host; the reason is kept for the funnel
            # named by file (ids cannot hold '.'), so it never reads as a library host's row
            skipped.append({"host": file.name, "file": str(file), "reason": exc.bare_message})
    ids = Counter(h.id for h in hosts)
    twice = sorted(i for i, n in ids.items() if n > 1)
    if twice:
        raise ScreeningError(f"host id(s) {', '.join(twice)} given by more than one structure", source=str(path))
    return hosts, skipped


def combined_hosts(hosts_file, structures: str | Path | None) -> tuple[list[Host], list[dict]]:
    """The host library plus the structures' hosts; a host id in both stops the screen."""
    library = load_hosts(hosts_file)
    if structures is None:
        return library, []
    from_structures, skipped = load_structures(structures)
    known = {h.id for h in library}
    clash = sorted(h.id for h in from_structures if h.id in known)
    if clash:
        raise ScreeningError(f"host id(s) {', '.join(clash)} are in the host library {hosts_file} too; "
                             "rename the structure file or set 'id' in its sidecar", source=str(structures))
    return library + from_structures, skipped


def load_screen_hosts(rules) -> tuple[list[Host], list[dict]]:
    """Every host of a rule set: its host library and, if it names one, its structures."""
    return combined_hosts(rules.hosts_path, rules.structures_path)


def skipped_rows(skipped: list[dict]) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Funnel rows (rule ``structure``, nothing enumerated) and rejected rows for skipped structures."""
    funnel = pd.DataFrame({"host": [s["host"] for s in skipped], "rule": RULE, "enumerated": 0,
                           "candidates_in": 0, "candidates_out": 0, "removed": 0},
                          columns=["host", "rule", "enumerated", "candidates_in", "candidates_out", "removed"])
    rejected = pd.DataFrame({
        "host": [s["host"] for s in skipped], "dopant": "", "dopant_site": "", "codopant": "", "codopant_site": "",
        "rule": RULE, "value": float("nan"), "threshold": float("nan"), "scope": "host",
        "detail": [s["reason"] for s in skipped], "candidate_id": ""},
        columns=["host", "dopant", "dopant_site", "codopant", "codopant_site", "rule", "value", "threshold",
                 "scope", "detail", "candidate_id"])
    return funnel, rejected


def structures_hash(path: str | Path) -> str:
    """SHA-256 over the structure files and their sidecars (names and bytes), for the stage record."""
    import hashlib

    digest = hashlib.sha256()
    for file in _structure_files(Path(path)):
        if file.is_file():
            digest.update(file.name.encode() + b"\0" + file.read_bytes() + b"\0")
    return digest.hexdigest()


def structure_inputs(rules) -> list[str]:
    """The structure files and sidecars of a rule set (Snakemake inputs of prepare_hosts), [] when none."""
    path = rules.structures_path
    if path is None:
        return []
    return [str(p) for p in _structure_files(path) if p.is_file()]


def _structure_files(path: Path) -> list[Path]:
    if path.is_file():
        return [path, path.with_suffix(".yaml")]
    return sorted(list(path.glob("*.cif")) + list(path.glob("*.yaml")))
