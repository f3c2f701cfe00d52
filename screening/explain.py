"""``screening explain CANDIDATE [--results DIR] [--rules FILE] [--json]``: why a candidate is where it is.

For a shortlisted candidate (by rank or by id) every rule it met is
recomputed from the stage files and the rule set, with value, threshold and
margin; its defects are spelled out in Kröger–Vink notation (Kröger & Vink,
Solid State Phys. 3 (1956) 307: ``M_S`` with • per positive and ′ per negative
effective charge unit); and its score is taken apart into the weighted terms
of the rank stage (README, Methods, "Ranking").  For a rejected candidate the
rule that removed it is printed from ``rejected.parquet``, including the
``scope == 'ion'`` rows that stand for every candidate using that ion on that
site.

The rule set is the one named in the results folder's ``provenance.json``
(keys ``ruleset.path`` or ``ruleset_path``; ``ruleset.text`` / ``ruleset.content``
when the file has moved), or ``--rules``.
"""
from __future__ import annotations

import difflib
import json
import math
import re
from pathlib import Path

from screening.errors import ScreeningError

DEFAULT_RESULTS = Path("results") / "default"
NEEDED = ("stages/ranked.parquet", "stages/hosts.json", "rejected.parquet", "funnel.csv")
_ID = re.compile(r"^(?P<host>[^/]+)/(?P<dopant>[^@]+)@(?P<dsite>[^+]+)"
                 r"(?:\+V_O|\+(?P<codopant>[^@]+)@(?P<csite>.+))?$")
_DEFECT = re.compile(r"(?:(?P<n>\d+) )?(?P<species>V|[A-Z][a-z]?)_(?P<site>[A-Za-z0-9]+)(?P<marks>[•′×]+)"
                     r"|(?:(?P<ne>\d+) )?e′")


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "explain", help="every rule a candidate met, its defects and the numbers behind its score",
        description="Explain one candidate of a finished screen: the rules it met (value, threshold, margin), "
                    "its defects in Kröger–Vink notation and its score term by term; for a rejected candidate, "
                    "the rule that removed it.")
    parser.add_argument("candidate", metavar="CANDIDATE",
                        help="a rank (e.g. 3) or a candidate id from the shortlist (e.g. 'SrTiO3/Cr3+@Ti+La3+@Sr')")
    parser.add_argument("--results", type=Path, default=DEFAULT_RESULTS,
                        help="results folder of the screen (default: results/default)")
    parser.add_argument("--rules", type=Path, default=None,
                        help="rule-set YAML (default: the one recorded in the folder's provenance.json)")
    parser.add_argument("--json", action="store_true", help="print one JSON object")


# --- inputs --------------------------------------------------------------------------------

def _check_folder(results: Path) -> None:
    if not results.is_dir():
        raise ScreeningError("results folder not found (run `screening run` first)", source=str(results))
    missing = [name for name in NEEDED if not (results / name).is_file()]
    if missing:
        raise ScreeningError(f"results folder is incomplete: missing {', '.join(missing)} "
                             "(rerun `screening run` for it)", source=str(results))


def _ruleset(results: Path, rules_path: Path | None):
    from screening import rulesets

    if rules_path is not None:
        return rulesets.load_ruleset(rules_path), str(rules_path)
    provenance_file = results / "provenance.json"
    if not provenance_file.is_file():
        raise ScreeningError("no provenance.json, so the rule set of this screen is unknown: pass --rules FILE",
                             source=str(results))
    try:
        record = json.loads(provenance_file.read_text(encoding="utf-8"))
    except json.JSONDecodeError as exc:
        raise ScreeningError(f"not valid JSON (line {exc.lineno}): {exc.msg}", source=str(provenance_file)) from None
    section = record.get("ruleset", record.get("rule_set")) if isinstance(record, dict) else None
    path = record.get("ruleset_path") if isinstance(record, dict) else None
    text = None
    if isinstance(section, dict):
        path = path or section.get("path")
        text = section.get("text") or section.get("content")
    elif isinstance(section, str):
        path = path or section
    if path and Path(path).is_file():
        return rulesets.load_ruleset(path), str(path)
    if isinstance(text, str):
        import yaml

        document = yaml.safe_load(text)
        source = f"{provenance_file} (recorded rule set)"
        filled = rulesets.validate_document(document, source)
        return _SectionsOnly(filled), source
    raise ScreeningError("names no rule set that can be read (expected ruleset.path or ruleset.text): "
                         "pass --rules FILE", source=str(provenance_file))


class _SectionsOnly:
    """The parts of a rule set that explain needs, from a copy recorded in provenance.json."""

    def __init__(self, filled: dict):
        from screening import rulesets

        self.name = filled["name"]
        self.sections = {name: filled[name] for name in rulesets.SECTIONS}


# --- lookup --------------------------------------------------------------------------------

def _find(candidate: str, ranked, rejected):
    """('ranked', row) or ('rejected', rows, parsed id); ScreeningError when neither holds it."""
    text = candidate.strip()
    if not text:
        raise ScreeningError("empty candidate: give a rank or a candidate id", source="explain CANDIDATE")
    if text.isdigit():
        rank = int(text)
        hit = ranked[ranked["rank"] == rank]
        if hit.empty:
            span = f"1–{int(ranked['rank'].max())}" if len(ranked) else "none (the shortlist is empty)"
            raise ScreeningError(f"rank {rank} does not exist; ranks on this shortlist: {span}",
                                 source="explain CANDIDATE")
        return "ranked", hit.iloc[0], None
    hit = ranked[ranked["candidate_id"] == text]
    if len(hit):
        return "ranked", hit.iloc[0], None
    match = _ID.match(text)
    if match is None:
        raise ScreeningError(f"{text!r} is neither a rank nor a candidate id like 'SrTiO3/Cr3+@Ti+La3+@Sr' "
                             "or 'TiO2-anatase/Ga3+@Ti+V_O'", source="explain CANDIDATE")
    rows = rejected[rejected["candidate_id"].fillna("") == text]
    ions = [(match["dopant"], match["dsite"])] + ([(match["codopant"], match["csite"])] if match["codopant"] else [])
    ion_rows = rejected[(rejected["scope"] == "ion") & (rejected["host"] == match["host"])]
    keep = ion_rows.apply(lambda r: (r["dopant"], r["dopant_site"]) in ions, axis=1) if len(ion_rows) else []
    if len(ion_rows):
        import pandas as pd

        rows = pd.concat([rows, ion_rows[keep.to_numpy(bool)]])
    if rows.empty:
        near = difflib.get_close_matches(text, list(ranked["candidate_id"]) + list(
            rejected["candidate_id"].dropna()), n=3)
        hint = f"; did you mean {', '.join(near)}?" if near else ""
        raise ScreeningError(f"no candidate {text!r} in this screen: it is not on the shortlist and no rule "
                             f"removed it (the host, ion or site may not be in the screen){hint}",
                             source="explain CANDIDATE")
    return "rejected", rows, match


# --- the checks ----------------------------------------------------------------------------

def _check(rule, what, value, threshold, margin, unit="", note=""):
    return {"rule": rule, "what": what, "value": value, "threshold": threshold, "margin": margin,
            "unit": unit, "note": note}


def _float(x):
    return None if x is None or (isinstance(x, float) and math.isnan(x)) else float(x)


def rule_checks(row, sections: dict, site_radii: dict) -> list[dict]:
    """Every rule a shortlisted candidate met, recomputed from its stage row and the rule set."""
    from screening import bands, ions

    filters, scarcity, alignment = sections["filters"], sections["scarcity"], sections["alignment"]
    elements = ions.load_ion_data().elements
    states = ions.load_ion_data().states
    placed = [("dopant", row["dopant_ion"], row["dopant_element"], int(row["dopant_charge"]), row["dopant_site"])]
    if row["codopant_ion"]:
        placed.append(("codopant", row["codopant_ion"], row["codopant_element"], int(row["codopant_charge"]),
                       row["codopant_site"]))
    checks = []
    for role, ion, element, charge, site in placed:
        common = states[(states["element"] == element) & (states["charge"] == charge)]["common"].any()
        checks.append(_check("oxidation_state", f"{role} {ion}", "common" if common else "not common",
                             "common only" if filters["oxidation_state"]["common_only"] else "any listed", None,
                             note="mendeleev oxidation states, category 'main'"))
    limit = float(filters["radius_mismatch"]["max_relative"])
    for role, ion, element, charge, site in placed:
        mismatch = float(row[f"{role}_mismatch"])
        radius = float(row[f"{role}_radius_a"])
        site_r = site_radii.get((row["host"], site))
        note = (f"r({ion}) {radius:.3f} Å" + (f" vs {site} {site_r:.3f} Å" if site_r else "")
                + f" at CN {int(row[f'{role}_coordination'])}"
                + (", radius estimated" if bool(row[f"{role}_radius_estimated"]) else ""))
        checks.append(_check("radius_mismatch", f"{role} {ion} on {site}", mismatch, limit, limit - mismatch,
                             note=note))
    radioactive = [e for _, _, e, _, _ in placed if bool(elements.loc[e, "radioactive"])]
    checks.append(_check("radioactive", "dopant elements", ", ".join(radioactive) or "none radioactive",
                         "excluded" if scarcity["exclude_radioactive"] else "allowed", None, note="mendeleev"))
    floor = scarcity["min_crust_ppm"]
    for role, ion, element, _, _ in placed:
        ppm = float(elements.loc[element, "abundance_crust_ppm"])
        checks.append(_check("abundance", f"{role} element {element}", ppm, _float(floor),
                             None if floor is None else math.log10(ppm / float(floor)), "ppm",
                             note="margin in decades above the floor (CRC Handbook via mendeleev)"))
    max_ratio = int(filters["charge_balance"]["max_ratio"])
    count = int(row["max_ratio_count"])
    checks.append(_check("charge_balance", f"compensation {row['compensation']}"
                         + (f", ratio {row['ratio']}" if row["ratio"] else ""), count, max_ratio, max_ratio - count,
                         note="largest count of one kind of ion in the balanced set"))
    for rule, key, column, unit in (("cost", "max_cost_usd_per_kg", "cost_usd_per_kg", "USD/kg"),
                                    ("hhi_production", "max_hhi_production", "hhi_production", ""),
                                    ("hhi_reserves", "max_hhi_reserves", "hhi_reserves", "")):
        limit_value = scarcity[key]
        value = _float(row.get(column))
        checks.append(_check(rule, column, value, _float(limit_value),
                             None if limit_value is None or value is None else float(limit_value) - value, unit,
                             note="" if limit_value is not None else "no ceiling set in the rule set"))
    # the alignment rule as the rank stage applies it: the calibrated CBM (unless switched off),
    # the highest occupied level (dopant level or VBM) and the probability of clearing both margins
    ph = float(alignment["ph"])
    shift = -bands.NERNST_SLOPE_V * ph
    calibrated = bool(alignment.get("calibrated_edges", False)) and "cbm_cal_v_nhe_ph0" in row
    cbm = float(row["cbm_cal_v_nhe_ph0" if calibrated else "cbm_v_nhe_ph0"]) + shift
    occupied = cbm + float(row["onset_ev"])
    her, oer = bands.alignment_margins(cbm, occupied, ph, alignment["her_overpotential_v"],
                                       alignment["oer_overpotential_v"])
    hydrogen, oxygen = bands.water_levels(ph)
    mode = alignment["mode"]
    needed = {"overall": ("her", "oer"), "hydrogen": ("her",), "oxygen": ("oer",)}[mode]
    edge = "calibrated CBM" if calibrated else "CBM (raw Butler–Ginley)"
    note = "enters the probability" if "her" in needed else f"not needed in mode {mode}"
    if calibrated and bool(row.get("calibration_extrapolated", False)):
        note += "; extrapolated: the host lies outside the raw-CBM span of the calibration's reference rows"
    checks.append(_check("alignment", f"{edge} vs H+/H2 - {alignment['her_overpotential_v']:g} V at pH {ph:g}",
                         cbm, hydrogen - alignment["her_overpotential_v"], float(her), "V vs NHE", note=note))
    checks.append(_check("alignment", f"highest occupied level vs O2/H2O + {alignment['oer_overpotential_v']:g} V "
                         f"at pH {ph:g}", occupied, oxygen + alignment["oer_overpotential_v"], float(oer),
                         "V vs NHE", note="enters the probability" if "oer" in needed
                         else f"not needed in mode {mode}"))
    if "alignment_probability" in row and "min_probability" in alignment:
        probability = float(row["alignment_probability"])
        floor = float(alignment["min_probability"])
        checks.append(_check("alignment", f"probability of clearing the margins (mode {mode})", probability,
                             floor, probability - floor, "",
                             note="the rule" if alignment.get("required", True) else "ranks only (not required)"))
    return checks


def defect_lines(defects: str) -> list[dict]:
    """Each defect of a Kröger–Vink set, with its count and effective charge."""
    out = []
    for m in _DEFECT.finditer(defects or ""):
        if m["species"] is None:
            out.append({"defect": "e′", "count": int(m["ne"] or 1), "species": "electron", "site": "conduction band",
                        "effective_charge": -1})
            continue
        marks = m["marks"]
        charge = marks.count("•") - marks.count("′")
        out.append({"defect": f"{m['species']}_{m['site']}{marks}", "count": int(m["n"] or 1),
                    "species": "vacancy" if m["species"] == "V" else m["species"], "site": m["site"],
                    "effective_charge": charge})
    return out


def score_parts(row, weights: dict) -> list[dict]:
    missing = [f"term_{name}" for name in weights if f"term_{name}" not in row]
    if missing:
        raise ScreeningError(f"stages/ranked.parquet has no column(s) {', '.join(missing)} for the rule set's "
                             "ranking weights: the folder was written by another rule set or an older version; "
                             "rerun the screen or pass the --rules it ran with", source="explain")
    parts = []
    for name, weight in weights.items():
        term = float(row[f"term_{name}"])
        parts.append({"term": name, "weight": float(weight), "value": term, "contribution": float(weight) * term})
    return parts


_TERM_INPUT = {"sth": (("expected_sth", "sth_limit", "alignment_probability"),
                       "expected STH (STH limit x alignment probability) / 0.179"),
               "ingap": (("ingap_risk",), "0 / -0.5 / -1 for in-gap risk low / medium / high"),
               "alignment": (("alignment_margin_v",), "clip(margin / 0.5 V, -1, 1)"),
               "cost": (("cost_usd_per_kg",), "-log10(cost) / 4"),
               "abundance": (("scarcest_abundance_ppm",), "log10(scarcest ppm) / 6"),
               "strain": (("dopant_mismatch", "codopant_mismatch"), "-(largest mismatch) / ceiling")}
"""The stage columns each score term is computed from (pipeline.score_terms); other terms show no inputs."""


# --- the command ---------------------------------------------------------------------------

def explain(candidate: str, results: Path, rules_path: Path | None = None) -> dict:
    import pandas as pd

    results = Path(results)
    _check_folder(results)
    ranked = pd.read_parquet(results / "stages" / "ranked.parquet")
    rejected = pd.read_parquet(results / "rejected.parquet")
    kind, found, parsed = _find(candidate, ranked, rejected)
    if kind == "rejected":
        from screening.pipeline import FUNNEL_ORDER

        order = {r: i for i, r in enumerate(FUNNEL_ORDER)}
        rows = found.assign(_o=found["rule"].map(order)).sort_values("_o", kind="stable")
        records = [{"rule": r["rule"], "scope": r["scope"], "value": _float(r["value"]),
                    "threshold": _float(r["threshold"]), "detail": r["detail"],
                    "ion": f"{r['dopant']} on {r['dopant_site']}" if r["scope"] == "ion" else None}
                   for _, r in rows.iterrows()]
        return {"candidate": candidate.strip(), "status": "rejected", "host": parsed["host"],
                "removed_by": records[0]["rule"], "rejections": records}
    rules, rules_source = _ruleset(results, rules_path)
    hosts = json.loads((results / "stages" / "hosts.json").read_text())
    site_radii = {(h["id"], s["label"]): s["radius_a"] for h in hosts["hosts"] for s in h["sites"]}
    row = found
    weights = rules.sections["ranking"]["weights"]
    parts = score_parts(row, weights)
    total = sum(p["contribution"] for p in parts)
    for p in parts:
        columns, formula = _TERM_INPUT.get(p["term"], ((), "see README, Methods"))
        p["input"] = {c: (row[c] if isinstance(row[c], str) else _float(row[c])) for c in columns
                      if c in row and (isinstance(row[c], str) or _float(row[c]) is not None)}
        p["formula"] = formula
    checks = rule_checks(row, rules.sections, site_radii)
    return {
        "candidate": row["candidate_id"], "status": "shortlisted", "rank": int(row["rank"]), "host": row["host"],
        "formula": row["formula"], "defects": row["defects"], "defect_list": defect_lines(row["defects"]),
        "rule_set": rules.name, "rule_set_source": rules_source, "checks": checks,
        "score": float(row["score"]), "score_recomputed": total, "score_parts": parts,
        "score_matches": bool(abs(total - float(row["score"])) < 1e-9),
    }


def _num(v, unit=""):
    if v is None:
        return "–"
    if isinstance(v, str):
        return v
    return f"{v:.4g}" + (f" {unit}" if unit else "")


def format_text(result: dict) -> str:
    if result["status"] == "rejected":
        lines = [f"{result['candidate']}: rejected, removed by rule '{result['removed_by']}'"]
        for r in result["rejections"]:
            scope = (f" (ion-level: {r['ion']} in {result['host']}; this stands for every candidate that uses it)"
                     if r["scope"] == "ion" else "")
            lines.append(f"  {r['rule']}: {r['detail']}  [value {_num(r['value'])}, threshold {_num(r['threshold'])}]"
                         + scope)
        return "\n".join(lines)
    lines = [f"#{result['rank']}  {result['candidate']}   {result['formula']}   score {result['score']:.4f}",
             f"  rule set: {result['rule_set']} ({result['rule_set_source']})", "",
             "Defects (Kröger–Vink):  " + result["defects"]]
    for d in result["defect_list"]:
        sign = "•" if d["effective_charge"] > 0 else "′" if d["effective_charge"] < 0 else "×"
        lines.append(f"  {d['count']} × {d['defect']:<10} {d['species']} on {d['site']}, effective charge "
                     f"{d['effective_charge']:+d} ({sign})")
    lines += ["", "Rules met:", f"  {'rule':<16} {'check':<44} {'value':>14} {'threshold':>14} {'margin':>10}"]
    for c in result["checks"]:
        lines.append(f"  {c['rule']:<16} {c['what']:<44} {_num(c['value'], c['unit']):>14} "
                     f"{_num(c['threshold'], c['unit']):>14} {_num(c['margin']):>10}"
                     + (f"   {c['note']}" if c["note"] else ""))
    lines += ["", "Score = sum of weight × term:"]
    for p in result["score_parts"]:
        inputs = ", ".join(f"{k} = {_num(v)}" for k, v in p["input"].items())
        lines.append(f"  {p['term']:<10} {p['weight']:>5g} × {p['value']:+.4f} = {p['contribution']:+.4f}"
                     f"   ({p['formula']}; {inputs})")
    lines.append(f"  total {result['score_recomputed']:+.4f}"
                 + ("" if result["score_matches"] else
                    f"  -- differs from the stored score {result['score']:.4f}: the rule set is not the one "
                    "this screen ran with"))
    return "\n".join(lines)


def run(args) -> int:
    result = explain(args.candidate, args.results, args.rules)
    if args.json:
        print(json.dumps(result, indent=2, ensure_ascii=False, allow_nan=False))
    else:
        print(format_text(result))
    return 0
