"""Perovskite formability of doped ABX3 compositions: Goldschmidt t and Bartel tau.

Sources
-------
* Goldschmidt tolerance factor, V. M. Goldschmidt, Naturwissenschaften 14 (1926) 477:
  t = (r_A + r_X) / (sqrt(2) (r_B + r_X)).  Perovskites usually have 0.8 < t < 1.05
  (common practice); tetragonal BaTiO3 and cubic KTaO3/KNbO3 sit just above
  (1.06 and 1.05 from Shannon radii), which is why the rule set's default ceiling is 1.10.
* Tolerance factor tau of C. J. Bartel et al., Sci. Adv. 5 (2019) eaav0693:
  tau = r_X/r_B - n_A (n_A - (r_A/r_B) / ln(r_A/r_B)), n_A the oxidation state of
  A and r_A > r_B; tau < 4.18 predicts a perovskite.
* Radii: Shannon, Acta Cryst. A32 (1976) 751, each ion at its site's coordination as
  the host library gives it: A at XII, B at VI and O at VI (2 B + 4 A) in the
  library's perovskites.  This is the common-practice choice that gives
  SrTiO3 1.00, BaTiO3 1.06 and CaTiO3 0.97; O at II (1.35 Å, the count of B
  neighbours only) would raise every t by about 0.01.

A doped composition gets site-averaged values: on each of the A, B and X sites
the radius (and, on A, the oxidation state that tau uses) is the average over
the ions on that site weighted by their share of it.  Oxygen vacancies carry no
radius and are left out of the X average.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening.errors import ScreeningError
from screening.hosts import Host

BARTEL_TAU_MAX = 4.18
"""Bartel et al. (2019): tau below this predicts a perovskite."""


def goldschmidt(r_a, r_b, r_x) -> np.ndarray:
    """Goldschmidt tolerance factor from radii in Angstrom (array-like)."""
    r_a, r_b, r_x = (np.asarray(v, dtype=float) for v in (r_a, r_b, r_x))
    return (r_a + r_x) / (np.sqrt(2.0) * (r_b + r_x))


def bartel_tau(r_a, r_b, r_x, n_a) -> np.ndarray:
    """Bartel et al. (2019) tau; NaN where r_A <= r_B (the formula needs the larger ion on A)."""
    r_a, r_b, r_x, n_a = (np.asarray(v, dtype=float) for v in (r_a, r_b, r_x, n_a))
    ratio = r_a / r_b
    valid = ratio > 1.0
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.log(np.where(valid, ratio, np.e))
        tau = r_x / r_b - n_a * (n_a - ratio / log_ratio)
    return np.where(valid, tau, np.nan)


def abo3_sites(host: Host) -> tuple[str, str] | None:
    """(A label, B label) of an ABO3 host, or None when the host is not ABO3.

    ABO3: two cation sites of one ion each per formula unit and three anions.  A
    is the site of the larger ion at its own coordination.
    """
    if len(host.sites) != 2 or host.anion.multiplicity != 3 or any(s.multiplicity != 1 for s in host.sites):
        return None
    first, second = host.sites
    a, b = (first, second) if first.radius_a >= second.radius_a else (second, first)
    return a.label, b.label


def host_table(hosts: dict[str, Host], families) -> pd.DataFrame:
    """One row per ABO3 host of the given families: labels, radii and the A-site charge."""
    families = set(families)
    rows = []
    for host in hosts.values():
        if host.family not in families:
            continue
        labels = abo3_sites(host)
        if labels is None:
            continue
        site = {s.label: s for s in host.sites}
        a, b = site[labels[0]], site[labels[1]]
        rows.append({"host": host.id, "a_site": a.label, "b_site": b.label, "x_site": host.anion.label,
                     "r_a": a.radius_a, "r_b": b.radius_a, "r_x": host.anion.radius_a,
                     "n_a": float(a.oxidation_state)})
    return pd.DataFrame(rows, columns=["host", "a_site", "b_site", "x_site", "r_a", "r_b", "r_x", "n_a"])


def site_averaged(candidates: pd.DataFrame, hosts: dict[str, Host], families) -> pd.DataFrame:
    """Site-averaged r_A, r_B, r_X, n_A, t and tau of every candidate on an ABO3 host of ``families``.

    Returns a frame on the index of ``candidates`` with columns ``applies`` (bool)
    and r_a, r_b, r_x, n_a, goldschmidt_t, bartel_tau (NaN where it does not apply).
    A dopant on a site of a perovskite host with no tabulated or estimated radius
    is refused: the radius rule runs first and removes those.
    """
    table = host_table(hosts, families).set_index("host")
    out = pd.DataFrame(index=candidates.index)
    # one hash look-up of the host column (Series.map walks arrow strings in Python)
    row = table.index.get_indexer(candidates["host"])
    applies = row >= 0
    out["applies"] = applies
    columns = {}
    for column in ("a_site", "b_site", "x_site", "r_a", "r_b", "r_x", "n_a"):
        values = table[column].to_numpy(dtype=object if column.endswith("_site") else float)
        missing = None if column.endswith("_site") else np.nan
        columns[column] = np.where(applies, values[row] if len(values) else missing, missing)
    r = {"a": columns["r_a"].astype(float), "b": columns["r_b"].astype(float), "x": columns["r_x"].astype(float)}
    n_a = columns["n_a"].astype(float)
    host_r = dict(r)
    host_n_a = n_a.copy()
    for role in ("dopant", "codopant"):
        if f"{role}_site" not in candidates:
            continue
        site = candidates[f"{role}_site"].fillna("").astype(str).to_numpy()
        share = np.nan_to_num(candidates[f"{role}_fraction"].to_numpy(float))
        radius = candidates[f"{role}_radius_a"].to_numpy(float)
        present = applies & (site != "") & (share > 0)
        if np.any(present & np.isnan(radius)):
            bad = candidates.loc[present & np.isnan(radius), "candidate_id"].iloc[0]
            raise ScreeningError(f"{bad}: no radius for the {role} (the radius rule must run first)")
        for key in ("a", "b", "x"):
            on_site = present & (site == columns[f"{key}_site"])
            r[key] = r[key] + np.where(on_site, share * (np.nan_to_num(radius) - host_r[key]), 0.0)
            if key == "a":
                charge = candidates[f"{role}_charge"].to_numpy(float)
                n_a = n_a + np.where(on_site, share * (charge - host_n_a), 0.0)
    out["r_a"], out["r_b"], out["r_x"], out["n_a"] = r["a"], r["b"], r["x"], n_a
    out["goldschmidt_t"] = np.where(applies, goldschmidt(r["a"], r["b"], r["x"]), np.nan)
    out["bartel_tau"] = np.where(applies, bartel_tau(r["a"], r["b"], r["x"], n_a), np.nan)
    return out
