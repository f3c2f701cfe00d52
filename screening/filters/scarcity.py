"""Scarcity rules: crustal-abundance floor and radioactivity per dopant element,
and cost and supply-concentration ceilings per composition.

Element data come from :mod:`screening.scarcity`, the module the audit command
uses too: crustal abundance in ppm (CRC Handbook via mendeleev), radioactivity
(mendeleev), mass-weighted raw-element cost and Herfindahl–Hirschman indices
(Gaultois et al., Chem. Mater. 25 (2013) 2911).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from screening import ions
from screening.filters import rejected_candidates, rejected_ions

COMPOSITION_RULES = {"cost": "max_cost_usd_per_kg", "hhi_production": "max_hhi_production",
                     "hhi_reserves": "max_hhi_reserves"}


def apply_radioactive(placements: pd.DataFrame, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Radioactive elements out (if the rule set says so); one rejection per ion on site."""
    # copy=True: under pandas copy-on-write to_numpy() may return a read-only view, and the
    # assignment below then raised "assignment destination is read-only" (found by tests/test_invariants.py)
    radioactive = placements["element"].map(ions.load_ion_data().elements["radioactive"]).astype(bool).to_numpy(copy=True)
    if not thresholds["exclude_radioactive"]:
        radioactive[:] = False
    def detail(rows):
        return placements["element"].iloc[rows] + " is radioactive (mendeleev)"

    return placements[~radioactive], rejected_ions(placements, radioactive, "radioactive", 1.0, 0.0, detail)


def apply_abundance(placements: pd.DataFrame, thresholds: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Crustal-abundance floor on the dopant element; a missing abundance stops the screen."""
    floor = thresholds["min_crust_ppm"]
    if floor is None:
        return placements, rejected_ions(placements, np.zeros(len(placements), bool), "abundance", None, None, "")
    ions.require_element_values(placements["element"].unique(), ["abundance_crust_ppm"],
                                context="scarcity rule 'min_crust_ppm'")
    abundance = placements["element"].map(ions.load_ion_data().elements["abundance_crust_ppm"]).to_numpy(float)
    scarce = abundance < float(floor)
    def detail(rows):
        # the sentence is formatted for the rejected rows only (a Python format per row)
        return (placements["element"].iloc[rows].to_numpy(object) + " crustal abundance "
                + np.array([f"{a:.3g}" for a in abundance[rows]], dtype=object) + f" ppm < {float(floor):g} ppm")

    return placements[~scarce], rejected_ions(placements, scarce, "abundance", abundance, float(floor), detail)


def apply_composition(candidates: pd.DataFrame, amounts: pd.DataFrame, thresholds: dict):
    """Cost and HHI ceilings on whole compositions; returns (kept, rejected, metrics of kept)."""
    from screening import scarcity

    metrics = scarcity.composition_metrics(amounts)
    rejected = []
    keep = np.ones(len(candidates), dtype=bool)
    templates = {"cost": ("cost_usd_per_kg", "cost {:.4g} USD/kg > {:g} USD/kg"),
                 "hhi_production": ("hhi_production", "HHI of production {:.0f} > {:g}"),
                 "hhi_reserves": ("hhi_reserves", "HHI of reserves {:.0f} > {:g}")}
    for rule, key in COMPOSITION_RULES.items():
        column, template = templates[rule]
        limit = thresholds[key]
        if limit is None:
            continue
        value = metrics[column].to_numpy(float)
        bad = keep & (value > float(limit))
        rejected.append(rejected_candidates(
            candidates, bad, rule, value, float(limit),
            lambda rows, value=value, template=template, limit=limit:
                [template.format(v, float(limit)) for v in value[rows]]))
        keep &= ~bad
    return candidates[keep], (pd.concat(rejected, ignore_index=True) if rejected else None), metrics[keep]
