"""Ion and element data: Shannon radii, oxidation states, electronegativity, abundance, cost.

Sources
-------
* Effective ionic radii by charge, coordination number and spin: R. D. Shannon,
  Acta Cryst. A32 (1976) 751, as carried by mendeleev's ``ionicradii`` table
  (cross-checked against pymatgen's copy in the tests).
* Oxidation states and whether a state is a common one: mendeleev's
  ``oxidationstates`` table (category ``main`` = common).
* Mulliken (absolute) electronegativity chi = (I1 + A) / 2 from mendeleev's first
  ionisation energies and electron affinities.  Where mendeleev has no affinity
  because the anion is unbound (Zn, Cd, Hg, Mg, Mn), and for N, whose
  estimated affinity in mendeleev differs from the published one, the value of Pearson's
  absolute-electronegativity table (Inorg. Chem. 27 (1988) 734) is used, as the
  published band-edge tables do; the shipped file beside this module says which.
  Any other element without an affinity gets chi = I1/2 and says so in
  ``chi_source``.
* Crustal abundance (ppm), price (USD/kg), relative supply risk and radioactivity:
  mendeleev's ``elements`` table (its documentation names the CRC Handbook for
  abundance and the Royal Society of Chemistry periodic table for supply risk).

The tables are built once from the two libraries and cached on disk as Parquet
with a version stamp; a change of either library or of :data:`TABLE_VERSION`
rebuilds them.  Missing values stay missing (NaN) in the tables; the functions
that rules call raise :class:`~screening.errors.DataMissingError` instead of
letting a NaN through.
"""
from __future__ import annotations

import json
import os
import re
import threading
from dataclasses import dataclass
from functools import lru_cache
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from screening.errors import DataMissingError, ScreeningError
from screening.files import atomic_write

TABLE_VERSION = "1"
_DATA_DIR = Path(__file__).with_name("data")
_PEARSON_FILE = _DATA_DIR / "pearson_1988_absolute_electronegativity.csv"

_ROMAN = {"I": 1, "II": 2, "III": 3, "IV": 4, "V": 5, "VI": 6, "VII": 7, "VIII": 8,
          "IX": 9, "X": 10, "XI": 11, "XII": 12, "XIV": 14}
_GEOMETRY_SUFFIX = re.compile(r"^(?P<roman>[IVX]+)(?P<geometry>SQ|PY)?$")

ELEMENT_COLUMNS = [
    "symbol", "atomic_number", "atomic_mass", "period", "block",
    "ionization_ev", "affinity_ev", "chi_mulliken_ev", "chi_source",
    "abundance_crust_ppm", "price_usd_per_kg", "supply_risk", "radioactive",
]


def roman_to_int(code: str) -> tuple[int, str]:
    """'VI' -> (6, ''), 'IVSQ' -> (4, 'SQ'): Shannon's coordination codes."""
    match = _GEOMETRY_SUFFIX.match(code)
    if not match:
        raise ValueError(f"not a Shannon coordination code: {code!r}")
    return _ROMAN[match["roman"]], match["geometry"] or ""


def int_to_roman(cn: int) -> str:
    for code, value in _ROMAN.items():
        if value == cn:
            return code
    raise ScreeningError(f"coordination number {cn} is outside Shannon's table (1-12, 14)")


@dataclass(frozen=True)
class IonData:
    """The three cached tables.

    elements: one row per element (index = symbol), columns :data:`ELEMENT_COLUMNS`.
    states:   element, charge, common (bool) -- every oxidation state mendeleev lists.
    radii:    element, charge, coordination (int), geometry ('' | 'SQ' | 'PY'),
              spin ('' | 'HS' | 'LS'), radius_a (Angstrom).
    version:  the stamp the cache was written with.
    """

    elements: pd.DataFrame
    states: pd.DataFrame
    radii: pd.DataFrame
    version: str


def data_version() -> str:
    """Stamp of the ion tables: our table version plus the source libraries' versions."""
    return (f"ions-{TABLE_VERSION}+mendeleev-{metadata.version('mendeleev')}"
            f"+pymatgen-{metadata.version('pymatgen')}")


def cache_dir() -> Path:
    root = os.environ.get("SCREENING_CACHE_DIR")
    if root:
        return Path(root)
    return Path(os.environ.get("XDG_CACHE_HOME", Path.home() / ".cache")) / "screening"


def _build_elements() -> pd.DataFrame:
    from mendeleev.fetch import fetch_table

    raw = fetch_table("elements")
    ionisation = fetch_table("ionizationenergies")
    first = ionisation[ionisation["ion_charge"] == 0].set_index("atomic_number")["ionization_energy"]
    elements = pd.DataFrame({
        "symbol": raw["symbol"].astype(str),
        "atomic_number": raw["atomic_number"].astype(int),
        "atomic_mass": raw["atomic_weight"].astype(float),
        "period": raw["period"].astype(int),
        "block": raw["block"].astype(str),
        "ionization_ev": raw["atomic_number"].map(first).astype(float),
        "affinity_ev": raw["electron_affinity"].astype(float),
        "abundance_crust_ppm": raw["abundance_crust"].astype(float),
        "price_usd_per_kg": raw["price_per_kg"].astype(float),
        "supply_risk": raw["relative_supply_risk"].astype(float),
        "radioactive": raw["is_radioactive"].fillna(0).astype(bool),
    })
    chi = (elements["ionization_ev"] + elements["affinity_ev"]) / 2
    source = pd.Series("(I1 + A)/2, mendeleev", index=elements.index)
    no_affinity = elements["affinity_ev"].isna()
    chi = chi.where(~no_affinity, elements["ionization_ev"] / 2)
    source = source.where(~no_affinity, "I1/2: no tabulated electron affinity, taken as zero")

    pearson = pd.read_csv(_PEARSON_FILE, comment="#").set_index("symbol")
    in_pearson = elements["symbol"].isin(pearson.index)
    chi = chi.where(~in_pearson, elements["symbol"].map(pearson["chi_ev"]))
    elements["affinity_ev"] = elements["affinity_ev"].where(
        ~in_pearson, elements["symbol"].map(pearson["affinity_ev"]))
    source = source.where(~in_pearson, "Pearson 1988 absolute electronegativity (negative affinity)")
    elements["chi_mulliken_ev"] = chi.astype(float)
    elements["chi_source"] = source.astype(str)
    return elements[ELEMENT_COLUMNS].set_index("symbol", drop=False)


def _build_states(symbols: pd.Series) -> pd.DataFrame:
    from mendeleev.fetch import fetch_table

    raw = fetch_table("oxidationstates")
    states = pd.DataFrame({
        "element": raw["atomic_number"].map(symbols).astype(str),
        "charge": raw["oxidation_state"].astype(int),
        "common": raw["category"].eq("main"),
    })
    states = states[states["charge"] != 0]
    return states.sort_values(["element", "charge"]).drop_duplicates(["element", "charge"]).reset_index(drop=True)


def _build_radii(symbols: pd.Series) -> pd.DataFrame:
    from mendeleev.fetch import fetch_table

    raw = fetch_table("ionicradii")
    raw = raw[raw["ionic_radius"].notna()]
    parsed = raw["coordination"].astype(str).map(roman_to_int)
    radii = pd.DataFrame({
        "element": raw["atomic_number"].map(symbols).astype(str).to_numpy(),
        "charge": raw["charge"].astype(int).to_numpy(),
        "coordination": [cn for cn, _ in parsed],
        "geometry": [geometry for _, geometry in parsed],
        "spin": raw["spin"].fillna("").astype(str).to_numpy(),
        # mendeleev stores Shannon's radii in pm
        "radius_a": (raw["ionic_radius"].astype(float) / 100.0).to_numpy(),
    })
    return radii.sort_values(["element", "charge", "coordination", "geometry", "spin"]).reset_index(drop=True)


def _cache_paths(directory: Path) -> dict[str, Path]:
    return {name: directory / f"{name}.parquet" for name in ("elements", "states", "radii")} | {
        "stamp": directory / "stamp.json"}


def build_ion_data() -> IonData:
    """Build the tables from mendeleev (no cache)."""
    elements = _build_elements()
    symbols = elements.set_index("atomic_number")["symbol"]
    return IonData(elements, _build_states(symbols), _build_radii(symbols), data_version())


@lru_cache(maxsize=1)
def load_ion_data() -> IonData:
    """The ion tables, from the on-disk cache when its stamp matches, else built and cached."""
    version = data_version()
    directory = cache_dir() / version
    paths = _cache_paths(directory)
    if paths["stamp"].exists() and json.loads(paths["stamp"].read_text()).get("version") == version:
        elements = pd.read_parquet(paths["elements"]).set_index("symbol", drop=False)
        return IonData(elements, pd.read_parquet(paths["states"]), pd.read_parquet(paths["radii"]), version)
    data = build_ion_data()
    for name in ("elements", "states", "radii"):
        atomic_write(paths[name], lambda tmp, frame=getattr(data, name): frame.to_parquet(tmp, index=False))
    # the stamp last: a cache without it is rebuilt
    atomic_write(paths["stamp"], lambda tmp: tmp.write_text(json.dumps({"version": version})))
    return data


# --- look-ups that rules use -------------------------------------------------------------

def element_row(symbol: str) -> pd.Series:
    elements = load_ion_data().elements
    if symbol not in elements.index:
        raise ScreeningError(f"unknown element symbol {symbol!r}")
    return elements.loc[symbol]


def require_element_values(symbols, columns, *, context: str) -> None:
    """Stop with one clear message if any of ``columns`` is missing for any of ``symbols``."""
    elements = load_ion_data().elements
    unknown = sorted(set(symbols) - set(elements.index))
    if unknown:
        raise ScreeningError(f"unknown element symbol(s) {', '.join(unknown)}", source=context)
    block = elements.loc[sorted(set(symbols)), list(columns)]
    missing = [f"{sym}: {col}" for sym, row in block.iterrows() for col in columns if pd.isna(row[col])]
    if missing:
        raise DataMissingError(
            "no value in the element data for " + "; ".join(missing)
            + " (mendeleev has none; remove the element from the pool or supply the value)",
            source=context)


def preferred_spin(elements: pd.Series, periods: pd.Series) -> np.ndarray:
    """High spin for 3d ions, low spin for 4d and 5d ions in oxides (common practice)."""
    return np.where(periods.to_numpy() <= 4, "HS", "LS")


def lookup_radii(query: pd.DataFrame) -> pd.DataFrame:
    """Shannon radius for each (element, charge, coordination) row of ``query``.

    Returns ``query`` with the columns ``radius_a``, ``spin`` and ``radius_estimated``
    added.  Where Shannon lists several spin states at that coordination the
    common-practice spin (see :func:`preferred_spin`) is taken; where he lists
    both a plain and a square-planar or pyramidal entry, the plain one.  Where the
    ion has no entry at that coordination but at least two other coordinations,
    the radius is estimated from a straight line of radius against ln(CN)
    through the ion's tabulated radii at the three coordinations nearest the
    target (see :func:`_line_estimates`; its held-out error is measured by
    :func:`radius_estimation_errors`) and ``radius_estimated`` is True.
    Where neither is possible ``radius_a`` is NaN: the caller decides whether that
    rejects a candidate; it is never treated as a pass.
    """
    data = load_ion_data()
    keys = query[RADIUS_KEY].drop_duplicates().reset_index(drop=True)
    known = _RESOLVED_RADII.get(data.version)
    if known is not None:
        keys = keys.merge(known[RADIUS_KEY], on=RADIUS_KEY, how="left", indicator=True)
        keys = keys.loc[keys["_merge"] == "left_only", RADIUS_KEY].reset_index(drop=True)
    if len(keys):
        resolved = _resolve_radii(keys, data)
        with _RESOLVED_LOCK:
            # another thread may have resolved some of the same keys meanwhile: keep one row a key, or
            # the merge below would repeat rows
            known = (pd.concat([_RESOLVED_RADII.get(data.version), resolved], ignore_index=True)
                     .drop_duplicates(RADIUS_KEY, ignore_index=True))
            _RESOLVED_RADII[data.version] = known
    return query.merge(known, on=RADIUS_KEY, how="left")


RADIUS_KEY = ["element", "charge", "coordination"]
# Radii already resolved in this process, by ion-table version: every shard of a screen (threads of
# one process) asks for much the same ions, and resolving them -- spin choice, estimates -- was the
# larger part of each look-up.  Only complete results are stored (an unknown element raises first).
_RESOLVED_RADII: dict[str, pd.DataFrame] = {}
_RESOLVED_LOCK = threading.Lock()


def _resolve_radii(keys: pd.DataFrame, data: IonData) -> pd.DataFrame:
    """radius_a, spin and radius_estimated for distinct (element, charge, coordination) ``keys``."""
    periods = keys["element"].map(data.elements["period"])
    if periods.isna().any():
        bad = sorted(keys.loc[periods.isna(), "element"].unique())
        raise ScreeningError(f"unknown element symbol(s) {', '.join(bad)}")
    keys["preferred_spin"] = preferred_spin(keys["element"], periods.astype(int))

    table = data.radii.copy()
    # plain geometry first, then the spin we prefer, then no spin label
    table["geometry_rank"] = (table["geometry"] != "").astype(int)
    exact = keys.merge(table, on=["element", "charge", "coordination"], how="left")
    exact["spin_rank"] = np.select(
        [exact["spin"] == exact["preferred_spin"], exact["spin"] == ""], [0, 1], default=2)
    exact = (exact.sort_values(["element", "charge", "coordination", "geometry_rank", "spin_rank"])
             .drop_duplicates(["element", "charge", "coordination"]))
    exact["radius_estimated"] = False

    missing = exact["radius_a"].isna()
    if missing.any():
        estimates = _estimate_radii(exact.loc[missing, ["element", "charge", "coordination", "preferred_spin"]],
                                    table)
        exact = exact.set_index(["element", "charge", "coordination"])
        estimates = estimates.set_index(["element", "charge", "coordination"])
        exact.loc[estimates.index, ["radius_a", "spin"]] = estimates[["radius_a", "spin"]].to_numpy()
        exact.loc[estimates.index, "radius_estimated"] = estimates["radius_a"].notna().to_numpy()
        exact = exact.reset_index()
    exact["spin"] = exact["spin"].fillna("").astype(str)
    exact["radius_a"] = exact["radius_a"].astype(float)
    exact["radius_estimated"] = exact["radius_estimated"].astype(bool)
    return exact[RADIUS_KEY + ["radius_a", "spin", "radius_estimated"]].reset_index(drop=True)


ESTIMATE_NEAREST = 3
"""Tabulated coordinations of one ion that the estimate of a missing radius is fitted through."""


def _estimation_points(table: pd.DataFrame, keys: pd.DataFrame) -> pd.DataFrame:
    """The tabulated points an estimate for each ion of ``keys`` is fitted through.

    Plain geometry only; the ion's preferred spin (and unlabelled entries) where
    Shannon lists that spin, else the unlabelled entries, else all of them; one
    mean radius per coordination.  Returns element, charge, coordination,
    radius_a and the spin the points stand for ('' when none).
    """
    ions_wanted = keys[["element", "charge", "preferred_spin"]].drop_duplicates(["element", "charge"])
    plain = table[table["geometry"] == ""].merge(ions_wanted, on=["element", "charge"], how="inner")
    by_ion = plain.assign(is_pref=plain["spin"] == plain["preferred_spin"], is_blank=plain["spin"] == "")
    has_pref = by_ion.groupby(["element", "charge"])["is_pref"].transform("any")
    has_blank = by_ion.groupby(["element", "charge"])["is_blank"].transform("any")
    use = np.where(has_pref, by_ion["is_pref"] | by_ion["is_blank"],
                   np.where(has_blank, by_ion["is_blank"], True))
    chosen = by_ion[use].assign(point_spin=np.where(has_pref[use], by_ion.loc[use, "preferred_spin"], ""))
    return (chosen.groupby(["element", "charge", "coordination"], as_index=False)
            .agg(radius_a=("radius_a", "mean"), spin=("point_spin", "first")))


def _line_estimates(targets: pd.DataFrame, points: pd.DataFrame, *, leave_out: bool = False) -> pd.DataFrame:
    """Radius at each target coordination from a line of radius against ln(CN).

    The line is fitted by least squares through the ion's :data:`ESTIMATE_NEAREST`
    tabulated coordinations nearest the target (nearer first, the lower one on a
    tie); with only two it is the line through both, with fewer the estimate is NaN.
    ``leave_out``: ignore a point at the target's own coordination (the held-out
    test of the method).  Vectorised: one merge and grouped sums, no loop over ions.
    """
    t = targets[["element", "charge", "coordination"]].drop_duplicates().reset_index(drop=True)
    t["target"] = np.arange(len(t))
    pairs = t.merge(points.rename(columns={"coordination": "point_cn", "radius_a": "point_r"}),
                    on=["element", "charge"], how="inner")
    if leave_out:
        pairs = pairs[pairs["point_cn"] != pairs["coordination"]]
    pairs = pairs.assign(distance=(pairs["point_cn"] - pairs["coordination"]).abs())
    pairs = pairs.sort_values(["target", "distance", "point_cn"], kind="stable")
    pairs = pairs[pairs.groupby("target").cumcount() < ESTIMATE_NEAREST]
    x = np.log(pairs["point_cn"].to_numpy(float))
    y = pairs["point_r"].to_numpy(float)
    sums = pd.DataFrame({"target": pairs["target"].to_numpy(), "n": 1.0, "x": x, "y": y, "xx": x * x,
                         "xy": x * y}).groupby("target").sum()
    spin = pairs.groupby("target")["spin"].first()
    denominator = sums["n"] * sums["xx"] - sums["x"] ** 2
    # two or more distinct coordinations give a non-zero denominator
    fit = (sums["n"] >= 2) & (denominator > 1e-12)
    slope = (sums["n"] * sums["xy"] - sums["x"] * sums["y"]) / denominator.where(fit)
    intercept = (sums["y"] - slope * sums["x"]) / sums["n"]
    radius = slope * np.log(t.loc[sums.index, "coordination"].to_numpy(float)) + intercept
    t["radius_a"] = radius.reindex(t["target"]).to_numpy(float)
    t["spin"] = spin.where(fit).reindex(t["target"]).fillna("").to_numpy()
    return t.drop(columns="target")


def _estimate_radii(missing: pd.DataFrame, table: pd.DataFrame) -> pd.DataFrame:
    """Estimated radius of each (element, charge, coordination) of ``missing`` (see :func:`_line_estimates`)."""
    points = _estimation_points(table, missing)
    return _line_estimates(missing, points)[["element", "charge", "coordination", "radius_a", "spin"]]


def radius_estimation_errors(min_coordinations: int = 3) -> pd.DataFrame:
    """The estimate tested on Shannon's own radii: leave one coordination out.

    For every ion (element, charge, in the spin the look-up would use) with at
    least ``min_coordinations`` tabulated coordinations, each tabulated radius
    is hidden in turn and estimated from the others.  Returns element, charge,
    coordination, radius_a (tabulated), estimate_a, error_a (estimate minus
    tabulated) and extrapolated (the hidden coordination lies outside the
    others' range, as a 12-fold A site usually does).
    """
    data = load_ion_data()
    table = data.radii
    ion_keys = table[["element", "charge"]].drop_duplicates()
    periods = ion_keys["element"].map(data.elements["period"]).astype(int)
    ion_keys = ion_keys.assign(preferred_spin=preferred_spin(ion_keys["element"], periods))
    points = _estimation_points(table, ion_keys)
    count = points.groupby(["element", "charge"])["coordination"].transform("size")
    points = points[count >= min_coordinations].reset_index(drop=True)
    estimates = _line_estimates(points, points, leave_out=True)
    out = points[["element", "charge", "coordination", "radius_a"]].merge(
        estimates.rename(columns={"radius_a": "estimate_a"})[["element", "charge", "coordination", "estimate_a"]],
        on=["element", "charge", "coordination"], how="left")
    out["error_a"] = out["estimate_a"] - out["radius_a"]
    span = points.groupby(["element", "charge"])["coordination"].agg(["min", "max"])
    lo = out.set_index(["element", "charge"]).index.map(span["min"])
    hi = out.set_index(["element", "charge"]).index.map(span["max"])
    out["extrapolated"] = (out["coordination"].to_numpy() == np.asarray(lo)) | (
        out["coordination"].to_numpy() == np.asarray(hi))
    return out


def shannon_radius(element: str, charge: int, coordination: int) -> float:
    """One tabulated or estimated radius in Angstrom; raises if there is none."""
    row = lookup_radii(pd.DataFrame({"element": [element], "charge": [charge],
                                     "coordination": [coordination]})).iloc[0]
    if np.isnan(row["radius_a"]):
        raise DataMissingError(
            f"no Shannon radius for {ion_label(element, charge)} at coordination {coordination} "
            "and too few tabulated coordinations to estimate one")
    return float(row["radius_a"])


def ion_label(element: str, charge: int) -> str:
    """'Cr', 3 -> 'Cr3+'; 'N', -3 -> 'N3-'; 'F', -1 -> 'F-'; 'Na', 1 -> 'Na+'."""
    magnitude = abs(int(charge))
    sign = "+" if charge > 0 else "-"
    return f"{element}{magnitude if magnitude != 1 else ''}{sign}"


_ION_LABEL = re.compile(r"^(?P<element>[A-Z][a-z]?)(?P<magnitude>\d*)(?P<sign>[+-])$")


def parse_ion_label(label: str) -> tuple[str, int]:
    match = _ION_LABEL.match(label.strip())
    if not match:
        raise ScreeningError(f"not an ion label like 'Cr3+' or 'N3-': {label!r}")
    magnitude = int(match["magnitude"] or 1)
    return match["element"], magnitude if match["sign"] == "+" else -magnitude


def oxidation_states(element: str) -> pd.DataFrame:
    states = load_ion_data().states
    return states[states["element"] == element]
