"""Dopant-induced levels placed in any host on the absolute scale, and the absorption onset they give.

Method
------
Langer & Heinrich, Phys. Rev. Lett. 55 (1985) 1414: the levels of a transition-metal impurity lie at
nearly the same absolute energy (relative to the vacuum level, so also on the NHE scale) in different host
semiconductors; the band offsets between hosts, not the impurity, set where the level falls in each gap.
A level measured in a reference host is therefore placed in another host through the two hosts' band edges.

The table ``data/dopant_levels.csv`` gives, per ion, the measured visible-light absorption onset of the
doped reference host, read as the transition from the ion's occupied level to the host's conduction band.
With potentials in V vs NHE at pH 0 (more positive = lower electron energy):

    E_level = CBM_ref + onset_ref                          (= VBM_ref - (gap_ref - onset_ref))
    onset_new = E_level - CBM_new                          (the level lies onset_new below CBM_new)

The host edges are the calibrated Butler–Ginley edges of :mod:`screening.calibration` (host formula and
measured gap), the same model for the reference and the new host, so that the model's common error cancels
in the difference; the calibrated edges are used because their leave-one-out error is the smaller.
Where several reference hosts carry the ion, the mean of their absolute levels is used, unless one of them
has the candidate host's composition: then that direct measurement is used.

A level with ``0 < onset_new < gap_new`` is an occupied state in the gap and sets the onset.  A level at or
below the new host's VBM (onset_new >= gap) or at or above its CBM (onset_new <= 0, the donor empties into
the conduction band) gives no sub-gap absorption: the onset stays the host gap and the flag says why.  An
ion without a table row keeps the host gap and the flag ``no_level_data``; no level is ever made up.
For a pair, the highest occupied level among the two ions (the smallest onset) sets the onset.
"""
from __future__ import annotations

from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from screening import bands, formulas
from screening.errors import ScreeningError

LEVELS_FILE = Path(__file__).with_name("data") / "dopant_levels.csv"
COLUMNS = ["ion", "site", "coordination", "reference_host", "reference_gap_ev", "onset_ev", "codoped_with",
           "source", "from_memory", "confidence"]
SITES = ("cation", "anion")
GAP_RANGE_EV = (0.0, 12.0)

# level_flag values
MEASURED = "measured"                    # the table holds this ion in a host of the candidate's composition
TRANSFERRED = "transferred"              # placed from other hosts by the Langer–Heinrich rule
OUTSIDE_GAP = "level_outside_gap"        # level lies in a band of this host: no sub-gap onset
NO_DATA = "no_level_data"                # no table row for any of the candidate's ions


def load_levels(path: Path = LEVELS_FILE) -> pd.DataFrame:
    """The level table, validated; raises ScreeningError naming file, row and field."""
    path = Path(path)
    if not path.is_file():
        raise ScreeningError("dopant-level table not found", source=str(path))
    table = pd.read_csv(path, comment="#", dtype={"codoped_with": str, "coordination": "Int64"},
                        keep_default_na=False, na_values={"coordination": [""]})
    validate_levels(table, source=str(path))
    return table


def validate_levels(table: pd.DataFrame, *, source: str = "dopant-level table") -> None:
    missing = [c for c in COLUMNS if c not in table.columns]
    if missing:
        raise ScreeningError(f"missing column(s) {', '.join(missing)}; required: {', '.join(COLUMNS)}",
                             source=source)
    bad = ~table["site"].isin(SITES)
    if bad.any():
        row = table.index[bad][0]
        raise ScreeningError(f"{table.at[row, 'site']!r} is not one of {', '.join(SITES)}", source=source,
                             entry=str(table.at[row, "ion"]), field="site")
    labels = table["ion"].astype(str).str.fullmatch(r"[A-Z][a-z]?[0-9]*[+-]")
    if not labels.all():
        row = table.index[~labels][0]
        raise ScreeningError(f"{table.at[row, 'ion']!r} is not an ion label like Cr3+ or N3-", source=source,
                             entry=str(table.at[row, "ion"]), field="ion")
    gap = pd.to_numeric(table["reference_gap_ev"], errors="coerce").to_numpy(float)
    onset = pd.to_numeric(table["onset_ev"], errors="coerce").to_numpy(float)
    for column, values, high in (("reference_gap_ev", gap, GAP_RANGE_EV[1]), ("onset_ev", onset, None)):
        limit = high if high is not None else gap
        bad = ~np.isfinite(values) | (values <= 0) | (values > limit)
        if bad.any():
            row = table.index[bad][0]
            allowed = f"0-{GAP_RANGE_EV[1]:g} eV" if high is not None else "above 0 and at most the reference gap"
            raise ScreeningError(f"{table.at[row, column]!r} is outside {allowed}", source=source,
                                 entry=str(table.at[row, "ion"]), field=column)
    for column in ("source", "reference_host"):
        empty = table[column].astype(str).str.strip() == ""
        if empty.any():
            row = table.index[empty][0]
            raise ScreeningError("empty; every row names its reference host and its published source",
                                 source=source, entry=str(table.at[row, "ion"]), field=column)
    for formula in table["reference_host"]:
        formulas.parse_formula(formula, source=f"{source}: reference_host")


def _composition_key(formula: str) -> str:
    # the same composition written two ways (TiO2, O2Ti) must match
    amounts = formulas.parse_formula(formula)
    return ";".join(f"{el}{amounts[el]}" for el in sorted(amounts))


def host_cbm_ph0(host_formulas, gaps, calibration) -> np.ndarray:
    """Calibrated Butler–Ginley CBM (V vs NHE, pH 0) of undoped hosts from formula and measured gap."""
    chi = np.array([bands.electronegativity(formulas.parse_formula(f)) for f in host_formulas], dtype=float)
    raw, _ = bands.band_edges(chi, np.asarray(gaps, dtype=float), ph=0.0)
    return np.atleast_1d(calibration.apply(raw))


@lru_cache(maxsize=4)
def _absolute_levels(path: str, calibration) -> pd.DataFrame:
    table = load_levels(Path(path))
    table = table.assign(
        reference_key=table["reference_host"].map(_composition_key),
        reference_cbm_v=host_cbm_ph0(table["reference_host"], table["reference_gap_ev"], calibration))
    table["level_v_nhe_ph0"] = table["reference_cbm_v"] + table["onset_ev"]
    return table


def absolute_levels(calibration, path: Path = LEVELS_FILE) -> pd.DataFrame:
    """The table with the reference host's calibrated CBM and each level's absolute position (V vs NHE, pH 0)."""
    return _absolute_levels(str(path), calibration).copy()


def ion_levels(queries: pd.DataFrame, calibration, path: Path = LEVELS_FILE) -> pd.DataFrame:
    """Place each queried ion in its host.

    ``queries``: columns ion, anion (bool: the ion sits on an anion site), coordination, host_formula,
    host_gap_ev, host_cbm_v (calibrated CBM of the host, V vs NHE at pH 0).  Returns, per query row (same
    index): ``has_data``, ``same_host``, ``level_v_nhe_ph0``, ``ion_onset_ev`` (NaN without data),
    ``in_gap`` and ``note``.
    """
    levels = absolute_levels(calibration, path)
    q = queries.copy()
    q["site"] = np.where(q["anion"].to_numpy(bool), "anion", "cation")
    q["host_key"] = q["host_formula"].map(_composition_key)
    q["_row"] = np.arange(len(q))
    matched = q.merge(levels, on=["ion", "site"], how="inner", suffixes=("", "_ref"))
    any_cn = matched["coordination_ref"].isna()
    matched = matched[any_cn | (matched["coordination_ref"] == matched["coordination"])]
    matched = matched.assign(same=matched["reference_key"] == matched["host_key"])
    # a measurement in the candidate's own composition wins; otherwise average the transferred levels
    has_same = matched.groupby("_row")["same"].transform("any")
    used = matched[~has_same | matched["same"]]
    grouped = used.groupby("_row")
    level = grouped["level_v_nhe_ph0"].mean()
    same = grouped["same"].any()
    refs = grouped.apply(lambda g: ", ".join(f"{r} ({o:g} eV)" for r, o in zip(g["reference_host"], g["onset_ev"])),
                         include_groups=False) if len(used) else pd.Series(dtype=str)

    out = pd.DataFrame(index=q["_row"].to_numpy())
    out["has_data"] = out.index.isin(level.index)
    out["same_host"] = same.reindex(out.index, fill_value=False).to_numpy(bool)
    out["level_v_nhe_ph0"] = level.reindex(out.index).to_numpy(float)
    onset = out["level_v_nhe_ph0"].to_numpy(float) - q["host_cbm_v"].to_numpy(float)
    gap = q["host_gap_ev"].to_numpy(float)
    out["ion_onset_ev"] = onset
    out["in_gap"] = out["has_data"].to_numpy() & (onset > 0) & (onset < gap)
    ions = q["ion"].astype(str).to_numpy()
    refs = refs.reindex(out.index, fill_value="").to_numpy(str)
    note = np.where(~out["has_data"], np.char.add(ions.astype(str), ": no level data"),
                    np.char.add(np.char.add(ions.astype(str), np.where(out["same_host"], ": measured in ",
                                                                        ": transferred from ")), refs))
    where = np.where(onset <= 0, "above the CBM", "at or below the VBM")
    note = np.where(out["has_data"] & ~out["in_gap"], np.char.add(np.char.add(note, ", falls "), where), note)
    note = np.where(out["in_gap"], np.char.add(np.char.add(note, ", onset "),
                                                np.char.mod("%.2f eV", np.nan_to_num(onset))), note)
    out["note"] = note
    out.index = queries.index
    return out


def candidate_onsets(candidates: pd.DataFrame, host_formula: pd.Series, host_gap: np.ndarray, calibration,
                     path: Path = LEVELS_FILE) -> pd.DataFrame:
    """Onset, occupied-level flag and note of each candidate (one row per candidate, same index).

    ``candidates`` carries dopant_ion, dopant_site_charge, dopant_coordination, kind and the codopant
    columns (as :func:`screening.enumerate.combine` builds them).  ``host_formula`` and ``host_gap`` are
    aligned with it.  Returns onset_ev, level_flag, level_note, level_same_host (bool: the level that sets
    the onset was measured in this composition, so it shares the host edges' calibration error).
    """
    n = len(candidates)
    host_formula = pd.Series(np.asarray(host_formula, dtype=object), index=candidates.index)
    gap = np.asarray(host_gap, dtype=float)
    if n == 0:
        return pd.DataFrame({"onset_ev": np.array([], float), "level_flag": np.array([], str),
                             "level_note": np.array([], str), "level_same_host": np.array([], bool)})
    unique_hosts = pd.DataFrame({"host_formula": host_formula.to_numpy(), "gap": gap}).drop_duplicates()
    unique_hosts["cbm"] = host_cbm_ph0(unique_hosts["host_formula"], unique_hosts["gap"], calibration)
    cbm = pd.DataFrame({"host_formula": host_formula.to_numpy(), "gap": gap}).merge(
        unique_hosts, on=["host_formula", "gap"], how="left")["cbm"].to_numpy(float)

    pair = candidates["kind"].eq("pair").to_numpy()
    results = []
    for role, rows in (("dopant", np.ones(n, bool)), ("codopant", pair)):
        q = pd.DataFrame({
            "ion": candidates[f"{role}_ion"].astype(str).to_numpy(),
            "anion": pd.to_numeric(candidates[f"{role}_site_charge"], errors="coerce").fillna(0).to_numpy() < 0,
            "coordination": pd.to_numeric(candidates[f"{role}_coordination"], errors="coerce").to_numpy(),
            "host_formula": host_formula.to_numpy(), "host_gap_ev": gap, "host_cbm_v": cbm})
        # look each distinct ion/host once, then map back: pools x hosts is small, candidates are many
        key = ["ion", "anion", "coordination", "host_formula", "host_gap_ev", "host_cbm_v"]
        distinct = q[rows].drop_duplicates(key).reset_index(drop=True)
        placed = pd.concat([distinct, ion_levels(distinct, calibration, path)], axis=1)
        merged = q.merge(placed, on=key, how="left")
        merged.loc[~rows, ["has_data", "in_gap", "same_host"]] = False
        merged.loc[~rows, "note"] = ""
        results.append(merged)
    dop, cod = results
    onsets = np.vstack([np.where(r["in_gap"].to_numpy(bool), r["ion_onset_ev"].to_numpy(float), np.inf)
                        for r in results])
    best = np.argmin(onsets, axis=0)
    best_onset = onsets[best, np.arange(n)]
    in_gap = np.isfinite(best_onset)
    onset = np.where(in_gap, best_onset, gap)
    same = np.where(best == 0, dop["same_host"].to_numpy(bool), cod["same_host"].to_numpy(bool)) & in_gap
    any_data = dop["has_data"].to_numpy(bool) | cod["has_data"].to_numpy(bool)
    flag = np.select([in_gap & same, in_gap, any_data], [MEASURED, TRANSFERRED, OUTSIDE_GAP], default=NO_DATA)
    note = np.where(pair, dop["note"].astype(str).to_numpy() + "; " + cod["note"].astype(str).to_numpy(),
                    dop["note"].astype(str).to_numpy())
    return pd.DataFrame({"onset_ev": onset, "level_flag": flag, "level_note": note, "level_same_host": same},
                        index=candidates.index)
