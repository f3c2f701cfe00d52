"""A plain per-candidate implementation of enumeration and the single-ion, charge and cost rules.

This is the yardstick of the benchmark: the same criteria as
``screening.pipeline.screen_shard`` written the obvious way, one Python loop
iteration per candidate, using the same data tables (looked up once into
dictionaries, so the comparison measures the loops, not the data access).
It also serves as an independent check: the benchmark asserts that it keeps
exactly the candidates the pipeline keeps.
"""
from __future__ import annotations

from fractions import Fraction
from math import gcd

from screening import ions, pools, scarcity
from screening.hosts import Host


def reference_screen(hosts: list[Host], pool_file, enumeration: dict, filters: dict, scarcity_rules: dict):
    """Returns (number of candidates enumerated, set of kept candidate ids)."""
    data = ions.load_ion_data()
    pool = pools.pool_ions(pools.load_pool(pool_file))
    pool_ions = [(r.element, int(r.charge), bool(r.common)) for r in pool.itertuples()]
    facts = scarcity.element_facts()
    abundance = facts["abundance_crust_ppm"].to_dict()
    price = facts["price_usd_per_kg"].to_dict()
    mass = data.elements["atomic_mass"].to_dict()
    radioactive = data.elements["radioactive"].to_dict()
    cns = sorted({s.coordination for h in hosts for s in h.sites})
    import pandas as pd

    query = pd.DataFrame([(e, c, cn) for e, c, _ in pool_ions for cn in cns],
                         columns=["element", "charge", "coordination"])
    radii = ions.lookup_radii(query)
    radius = {(r.element, r.charge, r.coordination): (r.radius_a, r.radius_estimated) for r in radii.itertuples()}

    x = Fraction(str(enumeration["dopant_fraction"]))
    max_mismatch = filters["radius_mismatch"]["max_relative"]
    allow_estimated = filters["radius_mismatch"]["allow_estimated"]
    max_ratio = filters["charge_balance"]["max_ratio"]
    floor = scarcity_rules["min_crust_ppm"]
    ceiling = scarcity_rules["max_cost_usd_per_kg"]

    def ion_ok(element, charge, common, site):
        if filters["oxidation_state"]["common_only"] and not common:
            return False
        r, estimated = radius[(element, charge, site.coordination)]
        if r != r or (estimated and not allow_estimated):
            return False
        if abs(r - site.radius_a) / site.radius_a > max_mismatch:
            return False
        if scarcity_rules["exclude_radioactive"] and radioactive[element]:
            return False
        if floor is not None and abundance[element] < floor:
            return False
        return True

    def cost_ok(host, changes):
        if ceiling is None:
            return True
        amounts = dict(host.composition())
        for element, amount in changes:
            amounts[element] = amounts.get(element, 0) + amount
        total_mass = sum(float(n) * mass[e] for e, n in amounts.items())
        cost = sum(float(n) * mass[e] * price[e] for e, n in amounts.items()) / total_mass
        return cost <= ceiling

    def kroger_vink(element, site, delta):
        mark = "•" * delta if delta > 0 else ("′" * -delta if delta < 0 else "×")
        return f"{element}_{site.label}{mark}"

    def make_candidate(host, site_a, element_a, charge_a, common_a, site_d=None, element_d=None, charge_d=None,
                       common_d=None):
        """The full candidate record, built before any rule looks at it (the per-candidate way)."""
        delta_a = charge_a - site_a.oxidation_state
        dopant = x * site_a.multiplicity
        record = {"host": host, "ions": [(element_a, charge_a, common_a, site_a)], "delta": delta_a,
                  "changes": [(site_a.element, -dopant), (element_a, dopant)], "ratio": None}
        record["id"] = f"{host.id}/{ions.ion_label(element_a, charge_a)}@{site_a.label}"
        if site_d is None:
            if delta_a == 0:
                record["compensation"] = "isovalent"
            elif delta_a < 0 and enumeration["vacancy_compensation"]:
                record["compensation"] = "oxygen_vacancy"
                record["changes"].append(("O", dopant * delta_a / 2))
                record["id"] += "+V_O"
            elif delta_a > 0 and enumeration["electron_compensation"]:
                record["compensation"] = "electrons"
            else:
                record["compensation"] = "none"
            record["defects"] = kroger_vink(element_a, site_a, delta_a)
            return record
        delta_d = charge_d - site_d.oxidation_state
        g = gcd(-delta_a, delta_d)
        n_a, n_d = delta_d // g, -delta_a // g
        codopant = dopant * n_d / n_a
        record["ions"].append((element_d, charge_d, common_d, site_d))
        record["ratio"] = (n_a, n_d)
        record["compensation"] = "codopant"
        record["changes"] += [(site_d.element, -codopant), (element_d, codopant)]
        record["defects"] = (f"{n_a} " * (n_a != 1) + kroger_vink(element_a, site_a, delta_a) + " + "
                             + f"{n_d} " * (n_d != 1) + kroger_vink(element_d, site_d, delta_d))
        record["id"] += f"+{ions.ion_label(element_d, charge_d)}@{site_d.label}"
        return record

    def first_failure(record):
        """The first rule the candidate fails, in the pipeline's order, or None."""
        for element, charge, common, site in record["ions"]:
            if filters["oxidation_state"]["common_only"] and not common:
                return "oxidation_state"
        for element, charge, common, site in record["ions"]:
            r, estimated = radius[(element, charge, site.coordination)]
            if r != r or (estimated and not allow_estimated) or abs(r - site.radius_a) / site.radius_a > max_mismatch:
                return "radius_mismatch"
        for element, charge, common, site in record["ions"]:
            if scarcity_rules["exclude_radioactive"] and radioactive[element]:
                return "radioactive"
        for element, charge, common, site in record["ions"]:
            if floor is not None and abundance[element] < floor:
                return "abundance"
        if record["compensation"] == "none" or (record["ratio"] and max(record["ratio"]) > max_ratio):
            return "charge_balance"
        if not cost_ok(record["host"], record["changes"]):
            return "cost"
        return None

    enumerated = 0
    kept = set()
    rejected = []
    for host in hosts:
        options = [(site, e, c, common) for site in host.sites for e, c, common in pool_ions
                   if not (e == site.element and c == site.oxidation_state)]
        records = []
        if enumeration["singles"]:
            records += [make_candidate(host, *option) for option in options]
        if enumeration["pairs"]:
            records += [make_candidate(host, *a, *d) for a in options if a[2] - a[0].oxidation_state < 0
                        for d in options if d[2] - d[0].oxidation_state > 0]
        enumerated += len(records)
        for record in records:
            failure = first_failure(record)
            if failure is None:
                kept.add(record["id"])
            else:
                rejected.append((record["id"], failure))
    return enumerated, kept
