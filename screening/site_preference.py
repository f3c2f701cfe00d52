"""Which site of a host a dopant ion prefers: radius match times data-mined substitution probability.

Sources
-------
* Substitution probability: G. Hautier, C. Fischer, V. Ehrlacher, A. Jain, G. Ceder,
  Inorg. Chem. 50 (2011) 656, "Data mined ionic substitutions for the discovery of
  new compounds", in the fitted form pymatgen ships
  (``pymatgen.analysis.structure_prediction.substitution_probability``):
  ``cond_prob(ion, site ion)``, the probability that ``ion`` replaces the fixed
  ``site ion`` in a known compound.
* Radius match: Shannon radii (Acta Cryst. A32 (1976) 751) at each site's
  coordination, relative mismatch m = |r - r_site| / r_site, weighted
  exp(-(m / w)^2) with w the rule set's mismatch ceiling (the 15 % size rule by
  default, common practice), so that a site at the ceiling counts e^-1 of a
  perfect match.

The combination is the project's own: for one ion in one host the weight of site
s is P_Hautier(ion | ion on s) * exp(-(m_s / w)^2), and ``site_likelihood`` is the
weights normalised over the host's cation sites (they sum to 1).  Where
pymatgen's table lacks the ion or a site's ion, the radius weight alone is used
for every site of that ion in that host (``probability_source`` says so).  The
site of the largest weight is ``preferred_site``.  A candidate pair's likelihood is
the product of its two ions' (taken as independent); it is preferred when both
ions sit on their preferred sites.  An ion on the anion site (the host model has
one) has likelihood 1.
"""
from __future__ import annotations

import json
import math
import re
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from screening import ions
from screening.hosts import Host, sites_frame


_SPECIES = re.compile(r"^([A-Z][a-z]?)(\d*)([+-])$")


def _species_key(text: str) -> tuple[str, int] | None:
    match = _SPECIES.match(text)
    if match is None:  # e.g. the dummy species 'D1+' of the table
        return None
    element, magnitude, sign = match.groups()
    if element == "D":
        return None
    charge = int(magnitude or 1)
    return element, charge if sign == "+" else -charge


@lru_cache(maxsize=1)
def _model() -> tuple[dict, dict]:
    """Hautier et al.'s fitted lambda table (the one pymatgen ships) as plain dictionaries.

    cond_prob(s1, s2) = exp(lambda(s1, s2)) / px(s2) with px(s) = sum over all species t of
    exp(lambda(s, t)) and lambda = alpha = -5 for pairs never observed, as in pymatgen's
    ``SubstitutionProbability``; computed here on (element, charge) keys because building
    pymatgen's object costs seconds per process.  The tests check the values against it.
    """
    import importlib.util

    spec = importlib.util.find_spec("pymatgen.core.structure_prediction")
    if spec is None or not spec.submodule_search_locations:
        spec = importlib.util.find_spec("pymatgen.analysis.structure_prediction")
    table_file = Path(next(iter(spec.submodule_search_locations))) / "data" / "lambda.json"
    rows = json.loads(table_file.read_text())
    lambdas: dict[frozenset, float] = {}
    species: set[tuple[str, int]] = set()
    for first, second, value in rows:
        a, b = _species_key(first), _species_key(second)
        if a is None or b is None:
            continue
        species.update((a, b))
        lambdas[frozenset((a, b))] = float(value)
    unobserved = math.exp(ALPHA)
    px = {s: 0.0 for s in species}
    partners = {s: 0 for s in species}
    for key, value in lambdas.items():
        members = tuple(key)
        if len(members) == 1:
            px[members[0]] += math.exp(value)
            partners[members[0]] += 1
        else:
            for member in members:
                px[member] += math.exp(value)
                partners[member] += 1
    for s in species:
        px[s] += (len(species) - partners[s]) * unobserved
    return lambdas, px


ALPHA = -5.0
"""lambda of a substitution never observed in the data (pymatgen's default)."""


def cond_prob(ion: tuple[str, int], site_ion: tuple[str, int]) -> float:
    """Probability of ``ion`` substituting for ``site_ion`` (Hautier et al. 2011); NaN if either is unknown."""
    lambdas, px = _model()
    if ion not in px or site_ion not in px:
        return float("nan")
    return math.exp(lambdas.get(frozenset((ion, site_ion)), ALPHA)) / px[site_ion]


def substitution_probability(pairs: pd.DataFrame) -> np.ndarray:
    """Hautier et al. (2011) cond_prob(ion, site ion) for rows element, charge, site_element, site_charge.

    NaN where the table has no entry for either species.  Evaluated once per
    distinct pair (a handful), then mapped back.
    """
    keys = pairs[["element", "charge", "site_element", "site_charge"]].drop_duplicates()
    values = {tuple(row): cond_prob((row[0], int(row[1])), (row[2], int(row[3])))
              for row in keys.itertuples(index=False, name=None)}
    index = pd.MultiIndex.from_frame(pairs[["element", "charge", "site_element", "site_charge"]])
    return np.array([values[k] for k in index], dtype=float)


def site_likelihoods(ion_hosts: pd.DataFrame, hosts: dict[str, Host], width: float) -> pd.DataFrame:
    """Likelihood of each cation site of the host for every (host, element, charge) row of ``ion_hosts``.

    Returns one row per (host, site, element, charge) with mismatch, size_weight,
    substitution_probability, probability_source, site_likelihood, preferred_site.
    """
    if not width > 0:
        raise ValueError(f"radius-match width must be positive, got {width}")
    wanted = ion_hosts[["host", "element", "charge"]].drop_duplicates()
    sites = sites_frame([hosts[h] for h in wanted["host"].unique()])
    table = wanted.merge(sites, on="host", how="inner")
    table = table[~((table["element"] == table["site_element"]) & (table["charge"] == table["site_charge"]))]
    table = table.reset_index(drop=True)
    radii = ions.lookup_radii(table[["element", "charge", "coordination"]])
    table["radius_a"] = radii["radius_a"].to_numpy()
    table["mismatch"] = (table["radius_a"] - table["site_radius_a"]).abs() / table["site_radius_a"]
    # no radius at that site: no evidence that it fits, weight 0 (never a pass by default)
    table["size_weight"] = np.nan_to_num(np.exp(-(table["mismatch"].to_numpy(float) / width) ** 2), nan=0.0)
    table["substitution_probability"] = substitution_probability(table)
    group = ["host", "element", "charge"]
    # every site of the ion in the host has a table value (one vectorised group-wise 'all', not a
    # Python function per group: that was two thirds of this function's time on 100 hosts)
    complete = table["substitution_probability"].notna().groupby([table[g] for g in group]).transform("all")
    table["probability_source"] = np.where(complete, "Hautier 2011 x radius", "radius only")
    weight = table["size_weight"] * np.where(complete, table["substitution_probability"].fillna(0.0), 1.0)
    total = weight.groupby([table[g] for g in group]).transform("sum")
    table["site_likelihood"] = np.where(total > 0, weight / total.where(total > 0, 1.0), np.nan)
    best = weight.groupby([table[g] for g in group]).transform("max")
    table["preferred_site"] = (weight > 0) & (weight == best)
    return table[["host", "site", "element", "charge", "coordination", "radius_a", "site_radius_a", "mismatch",
                  "size_weight", "substitution_probability", "probability_source", "site_likelihood",
                  "preferred_site"]]


def candidate_likelihoods(candidates: pd.DataFrame, hosts: dict[str, Host], width: float) -> pd.DataFrame:
    """``site_likelihood`` and ``preferred_site`` of each candidate (index of ``candidates``)."""
    out = pd.DataFrame(index=candidates.index)
    if candidates.empty:
        out["site_likelihood"] = pd.Series(dtype=float)
        out["preferred_site"] = pd.Series(dtype=bool)
        return out
    anion_label = {h: host.anion.label for h, host in hosts.items()}
    roles = {}
    for role in ("dopant", "codopant"):
        present = candidates[f"{role}_site"].fillna("").astype(str) != ""
        ions_here = pd.DataFrame({"host": candidates["host"], "element": candidates[f"{role}_element"],
                                  "charge": candidates[f"{role}_charge"], "site": candidates[f"{role}_site"]})[present]
        on_anion = ions_here["site"] == ions_here["host"].map(anion_label)
        cation = ions_here[~on_anion]
        likelihood = pd.Series(1.0, index=ions_here.index)
        preferred = pd.Series(True, index=ions_here.index)
        if len(cation):
            table = site_likelihoods(cation.astype({"charge": np.int64}), hosts, width)
            merged = cation.reset_index().merge(table, on=["host", "site", "element", "charge"], how="left")
            merged = merged.set_index("index")
            likelihood.loc[merged.index] = merged["site_likelihood"].to_numpy(float)
            preferred.loc[merged.index] = merged["preferred_site"].fillna(False).to_numpy(bool)
        roles[role] = (likelihood.reindex(candidates.index, fill_value=1.0),
                       preferred.reindex(candidates.index, fill_value=True))
    out["site_likelihood"] = (roles["dopant"][0] * roles["codopant"][0]).astype(float)
    out["preferred_site"] = (roles["dopant"][1] & roles["codopant"][1]).astype(bool)
    return out
