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

from functools import lru_cache

import numpy as np
import pandas as pd

from screening import ions
from screening.hosts import Host, sites_frame


@lru_cache(maxsize=1)
def _model():
    from pymatgen.analysis.structure_prediction.substitution_probability import SubstitutionProbability

    return SubstitutionProbability()


def substitution_probability(pairs: pd.DataFrame) -> np.ndarray:
    """Hautier et al. (2011) cond_prob(ion, site ion) for rows element, charge, site_element, site_charge.

    NaN where pymatgen's table has no entry for either species.  Evaluated once
    per distinct pair (a handful), then mapped back.
    """
    from pymatgen.core import Species

    model = _model()
    known = model.species
    keys = pairs[["element", "charge", "site_element", "site_charge"]].drop_duplicates()
    values = {}
    for row in keys.itertuples(index=False):
        ion, site_ion = Species(row.element, int(row.charge)), Species(row.site_element, int(row.site_charge))
        values[tuple(row)] = model.cond_prob(ion, site_ion) if ion in known and site_ion in known else np.nan
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
    complete = table.groupby(group)["substitution_probability"].transform(lambda p: p.notna().all())
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
