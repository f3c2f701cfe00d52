"""``screening audit FORMULA|SHORTLIST.csv [--rules FILE] [--json]``: the scarcity and cost audit.

Argument parsing and formatting only; every number comes from
:mod:`screening.scarcity`, whose docstring names the published sources
(CRC Handbook abundances, Gaultois et al. 2013 HHI, the EU 2024/1252 and
USGS 2022 critical lists, mendeleev prices and supply risk).
"""
from __future__ import annotations

import json
from pathlib import Path

from screening import scarcity
from screening.errors import ScreeningError

_CHECK_TEXT = {
    "min_crust_ppm": ("every element at least {} ppm in the crust", "scarcest {} ppm"),
    "exclude_radioactive": ("no radioactive element", "radioactive: {}"),
    "max_cost_usd_per_kg": ("cost at most {} USD/kg", "{} USD/kg"),
    "max_hhi_production": ("HHI of production at most {}", "{}"),
    "max_hhi_reserves": ("HHI of reserves at most {}", "{}"),
}


def register(subparsers) -> None:
    """Add the 'audit' sub-command to an argparse sub-parser set."""
    parser = subparsers.add_parser(
        "audit", help="scarcity, cost and supply audit of a formula or a shortlist",
        description="Per-element crustal abundance, price, HHI, supply risk, EU/USGS critical-list "
                    "membership, radioactivity and toxicity, and the whole material's cost, HHI and "
                    "scarcest element; with --rules, pass or fail against the rule set's scarcity section.")
    parser.add_argument("target", metavar="TARGET",
                        help="a formula such as SrTi0.98Rh0.02O3, or a shortlist .csv with columns host, formula")
    parser.add_argument("--rules", metavar="FILE", help="YAML rule set whose 'scarcity' section gives the thresholds")
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of tables")
    parser.set_defaults(func=run)


def _is_shortlist(target: str) -> bool:
    return target.lower().endswith(".csv") or Path(target).is_file()


def run(args) -> int:
    """Audit args.target; print tables or JSON; 0 on success, ScreeningError on bad input."""
    target = (args.target or "").strip()
    if not target:
        raise ScreeningError("empty formula", source="audit TARGET")
    rules = scarcity.load_scarcity_rules(args.rules) if args.rules else None
    if _is_shortlist(target):
        result = scarcity.audit_shortlist(target, rules)
        text = _format_shortlist(result, args.rules)
    else:
        result = scarcity.audit_formula(target, rules)
        text = _format_formula(result, args.rules)
    if args.json:
        print(json.dumps(result, indent=2, allow_nan=False))
    else:
        print(text)
    return 0


# --- formatting ----------------------------------------------------------------------------

def _num(value, digits: int = 4) -> str:
    if value is None:
        return "n/a"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return f"{value:.{digits}g}"
    return str(value)


def _flag(value) -> str:
    return "yes" if value else "-"


def _table(headers: list[str], rows: list[list[str]]) -> str:
    widths = [max(len(h), *(len(r[i]) for r in rows)) if rows else len(h) for i, h in enumerate(headers)]
    lines = ["  ".join(h.ljust(w) for h, w in zip(headers, widths)).rstrip(),
             "  ".join("-" * w for w in widths)]
    lines += ["  ".join(c.ljust(w) for c, w in zip(row, widths)).rstrip() for row in rows]
    return "\n".join(lines)


def _check_lines(checks: list[dict], passed, rules_path) -> list[str]:
    if not checks:
        return ["Thresholds: none checked (no --rules given, or every threshold of its scarcity section is off)"]
    lines = [f"Thresholds of the scarcity section ({rules_path}):"]
    rows = []
    for check in checks:
        rule_text, value_text = _CHECK_TEXT[check["rule"]]
        value = check["value"]
        shown = (", ".join(value) or "none") if isinstance(value, list) else _num(value)
        rows.append([check["rule"], rule_text.format(_num(check["threshold"])), value_text.format(shown),
                     "pass" if check["passed"] else "FAIL"])
    lines.append(_table(["rule", "requires", "this material", "result"], rows))
    lines.append(f"overall: {'pass' if passed else 'FAIL'}")
    return lines


def _format_formula(result: dict, rules_path) -> str:
    rows = []
    for e in result["elements"]:
        rows.append([
            e["symbol"], _num(e["amount"]), f"{100 * e['mass_fraction']:.2f}", _num(e["abundance_crust_ppm"], 3),
            _num(e["price_usd_per_kg"]), _num(e["price_year"]), _num(e["hhi_production"]),
            _num(e["hhi_reserves"]), _num(e["supply_risk"], 2), _flag(e["eu_strategic"]),
            _flag(e["eu_critical"]), _flag(e["usgs_critical_2022"]), _flag(e["radioactive"]), _flag(e["toxic"]),
        ])
    s = result["summary"]
    out = [f"Scarcity and cost audit of {result['formula']}", "",
           _table(["element", "per f.u.", "mass %", "crust ppm", "USD/kg", "price year", "HHI prod",
                   "HHI res", "supply risk", "EU strategic", "EU critical", "USGS 2022", "radioactive",
                   "toxic"], rows),
           "", "Whole material:",
           f"  molar mass        {s['molar_mass_g_mol']:.2f} g/mol",
           f"  raw-element cost  {_num(s['cost_usd_per_kg'])} USD/kg, {_num(s['cost_usd_per_mol'])} USD/mol",
           f"  HHI production    {s['hhi_production']:.0f} ({s['hhi_production_band']})",
           f"  HHI reserves      {s['hhi_reserves']:.0f} ({s['hhi_reserves_band']})",
           f"  scarcest element  {s['scarcest_reason']}",
           f"  listed elements   {', '.join(s['critical_elements']) or 'none'} (EU 2024/1252 or USGS 2022)",
           f"  radioactive       {', '.join(s['radioactive_elements']) or 'none'}", ""]
    out += _check_lines(result["checks"], result["passed"], rules_path)
    listed = [e for e in result["elements"] if e["eu_strategic_as"] or e["eu_critical_as"]]
    if listed:
        out += ["", "EU entries the elements fall under:"]
        out += [f"  {e['symbol']}: " + "; ".join(
            part for part in (e["eu_strategic_as"] and f"Annex I {e['eu_strategic_as']}",
                              e["eu_critical_as"] and f"Annex II {e['eu_critical_as']}") if part)
            for e in listed]
    cautions = [e for e in result["elements"] if e["toxic"]]
    if cautions:
        out += ["", "Cautions:"] + [f"  {e['symbol']}: {e['toxicity_caution']}" for e in cautions]
    missing_risk = [e["symbol"] for e in result["elements"] if e["supply_risk"] is None]
    out += ["", "Sources:"] + [f"  {key}: {text}" for key, text in result["sources"].items()]
    if missing_risk:
        out.append(f"  (no supply-risk value for {', '.join(missing_risk)} in mendeleev: shown as n/a)")
    out.append("  pymatgen costdb prices, for comparison: " + "; ".join(
        f"{e['symbol']} {_num(e['price_pymatgen_usd_per_kg'])} ({e['price_pymatgen_year'] or 'n/a'})"
        for e in result["elements"]))
    return "\n".join(out)


def _format_shortlist(result: dict, rules_path) -> str:
    checks = result["checks"]
    rows = []
    for c in result["candidates"]:
        verdict = ("-" if "passes" not in c else
                   "pass" if c["passes"] else "FAIL: " + ", ".join(k for k in checks if not c[f"pass_{k}"]))
        rows.append([str(c["line"]), c["host"], c["formula"], _num(c["cost_usd_per_kg"]),
                     f"{c['hhi_production']:.0f}", f"{c['hhi_reserves']:.0f}",
                     f"{c['scarcest_element']} ({_num(c['scarcest_abundance_ppm'], 3)})",
                     c["critical_elements"].replace(";", " ") or "-", verdict])
    summary = result["summary"]
    out = [f"Scarcity and cost audit of {result['shortlist']}: {summary['n_candidates']} candidate(s)", "",
           _table(["line", "host", "formula", "USD/kg", "HHI prod", "HHI res", "scarcest (ppm)",
                   "listed elements", "checks"], rows), ""]
    if summary["n_passed"] is not None:
        out.append(f"{summary['n_passed']} of {summary['n_candidates']} pass every threshold of "
                   f"the scarcity section ({rules_path}: {', '.join(checks) or 'none active'})")
    else:
        out.append("Thresholds: none checked (no --rules given)")
    out += ["", "Listed, scarce, radioactive or toxic elements and in how many candidates they appear:"]
    if summary["elements"]:
        out.append(_table(
            ["element", "candidates", "EU strategic", "EU critical", "USGS 2022", "below floor",
             "radioactive", "toxic", "crust ppm"],
            [[e["symbol"], str(e["candidates"]), _flag(e["eu_strategic"]), _flag(e["eu_critical"]),
              _flag(e["usgs_critical_2022"]), _flag(e["below_min_crust_ppm"]), _flag(e["radioactive"]),
              _flag(e["toxic"]), _num(e["abundance_crust_ppm"], 3)] for e in summary["elements"]]))
    else:
        out.append("  none")
    out += ["", "Sources:"] + [f"  {key}: {text}" for key, text in result["sources"].items()]
    return "\n".join(out)
