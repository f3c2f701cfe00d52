"""Scarcity, cost and supply audit of compositions: one module for the screen and for ``screening audit``.

Methods and sources
-------------------
* Crustal abundance (ppm = mg/kg): mendeleev ``abundance_crust``, which its
  documentation cites to the CRC Handbook of Chemistry and Physics, 95th ed.
  (W. M. Haynes, 2014), table "Abundance of elements in the earth's crust and
  in the sea".
* Herfindahl-Hirschman index (HHI, 0-10000) of production and of reserves per
  element: M. W. Gaultois et al., Chem. Mater. 25 (2013) 2911, the table that
  pymatgen ships as ``pymatgen/analysis/hhi_data.csv``.  A composition's HHI is
  the mass-fraction-weighted mean of its elements' values, as Gaultois et al.
  do (and as ``pymatgen.analysis.hhi.HHIModel.get_hhi`` does).  The low /
  moderate / high bands (< 1500, 1500-2500, > 2500) are those of the U.S.
  Department of Justice and Federal Trade Commission Horizontal Merger
  Guidelines (2010), which Gaultois et al. and pymatgen use.
* Element prices.  Primary source: mendeleev ``price_per_kg`` (USD/kg), which
  its documentation cites to Wikipedia, "Prices of chemical elements"
  (revision 1262554464, 2024, accessed 2025-01-03), taking the lower end
  where a range is given.  It is chosen over pymatgen's
  ``costdb_elements.csv`` because it is one source of one year for every
  element it covers, whereas the pymatgen table mixes sources of 2013, 2019 and
  2020 and holds values that are plainly off for this use (Fe at 0.03 USD/kg,
  Ne at 660000 USD/kg).  The pymatgen value, its source and its year are
  reported beside it for comparison, never mixed into the cost.
  A composition's cost per kg is the mass-fraction-weighted sum of its
  elements' prices (raw-element cost, no processing), as Gaultois et al. do.
* Relative supply risk (1 very low to 10 very high): mendeleev
  ``relative_supply_risk``, which its documentation cites to the Royal Society
  of Chemistry periodic table (accessed 2024-11-12).
* Critical-materials lists: the European Union's Regulation (EU) 2024/1252
  Annex I (strategic) and Annex II (critical) and the U.S. Geological Survey's
  2022 List of Critical Minerals (87 FR 10381), shipped beside this module with
  their mapping of raw materials to elements in the header.
* Radioactivity: mendeleev ``is_radioactive``.  Toxicity cautions: the shipped
  ``toxicity_flags.csv`` (GHS hazard classes of the common compounds after the
  EU CLP Annex VI, from memory; its header says which rows are common practice).

Every value that a metric needs and that the tables lack raises
:class:`~screening.errors.DataMissingError` naming the element and the column;
no metric is ever a silent NaN.
"""
from __future__ import annotations

import math
import re
from fractions import Fraction
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd

from screening.errors import DataMissingError, ScreeningError
from screening.formulas import parse_formula
from screening.ions import load_ion_data

_DATA_DIR = Path(__file__).with_name("data")
EU_FILE = _DATA_DIR / "critical_raw_materials_eu_2024.csv"
USGS_FILE = _DATA_DIR / "critical_minerals_usgs_2022.csv"
TOXICITY_FILE = _DATA_DIR / "toxicity_flags.csv"

ABUNDANCE_SOURCE = ("mendeleev abundance_crust: CRC Handbook of Chemistry and Physics, 95th ed. "
                    "(Haynes, 2014)")
PRICE_SOURCE = ("mendeleev price_per_kg: Wikipedia, 'Prices of chemical elements' "
                "(revision 1262554464, 2024; accessed 2025-01-03), lower end of a range")
PRICE_YEAR = 2024
SUPPLY_RISK_SOURCE = ("mendeleev relative_supply_risk: Royal Society of Chemistry periodic table "
                      "(accessed 2024-11-12); 1 = very low, 10 = very high")
HHI_SOURCE = "Gaultois et al., Chem. Mater. 25 (2013) 2911, table shipped by pymatgen (hhi_data.csv)"
EU_SOURCE = "Regulation (EU) 2024/1252, Annex I (strategic) and Annex II (critical), from memory"
USGS_SOURCE = "USGS 2022 List of Critical Minerals, 87 FR 10381, from memory"

# Bands of the U.S. DoJ/FTC Horizontal Merger Guidelines (2010), as Gaultois et al. use them.
HHI_BANDS = ((1500.0, "low"), (2500.0, "moderate"), (math.inf, "high"))

SCARCITY_KEYS = ("min_crust_ppm", "exclude_radioactive", "max_cost_usd_per_kg",
                 "max_hhi_production", "max_hhi_reserves")

# Columns a composition metric cannot do without, per metric.
_NEEDED = {
    "molar_mass_g_mol": ["atomic_mass"],
    "cost_usd_per_kg": ["price_usd_per_kg"],
    "hhi_production": ["hhi_production"],
    "hhi_reserves": ["hhi_reserves"],
    "scarcest_element": ["abundance_crust_ppm"],
}


# --- shipped and library tables -----------------------------------------------------------

def _known_symbols() -> pd.Index:
    return load_ion_data().elements.index


def _read_shipped(path: Path, columns: list[str]) -> pd.DataFrame:
    frame = pd.read_csv(path, comment="#", dtype=str, keep_default_na=False)
    missing = [c for c in columns if c not in frame.columns]
    if missing:
        raise ScreeningError(f"shipped table lacks column(s) {', '.join(missing)}", source=str(path))
    symbols = frame["symbol"].str.strip()
    unknown = sorted(set(symbols[symbols != ""]) - set(_known_symbols()))
    if unknown:
        raise ScreeningError(f"unknown element symbol(s) {', '.join(unknown)}", source=str(path), field="symbol")
    frame["symbol"] = symbols
    return frame


@lru_cache(maxsize=1)
def eu_list() -> pd.DataFrame:
    """Regulation (EU) 2024/1252 Annexes I and II: annex ('I' | 'II'), raw_material, symbol ('' if unmapped)."""
    frame = _read_shipped(EU_FILE, ["annex", "raw_material", "symbol"])
    bad = sorted(set(frame["annex"]) - {"I", "II"})
    if bad:
        raise ScreeningError(f"annex must be I or II, found {', '.join(bad)}", source=str(EU_FILE), field="annex")
    return frame


@lru_cache(maxsize=1)
def usgs_list() -> pd.DataFrame:
    """USGS 2022 List of Critical Minerals: mineral, symbol."""
    return _read_shipped(USGS_FILE, ["mineral", "symbol"])


@lru_cache(maxsize=1)
def toxicity_table() -> pd.DataFrame:
    """symbol, basis, caution -- one row per flagged element."""
    frame = _read_shipped(TOXICITY_FILE, ["symbol", "basis", "caution"])
    duplicated = sorted(frame.loc[frame["symbol"].duplicated(), "symbol"])
    if duplicated:
        raise ScreeningError(f"element(s) listed twice: {', '.join(duplicated)}", source=str(TOXICITY_FILE))
    return frame.set_index("symbol")


def _pymatgen_file(name: str) -> Path:
    from pymatgen.analysis import hhi

    return Path(hhi.__file__).with_name(name)


@lru_cache(maxsize=1)
def hhi_table() -> pd.DataFrame:
    """Gaultois et al. (2013) per-element HHI, index symbol, columns hhi_production, hhi_reserves."""
    path = _pymatgen_file("hhi_data.csv")
    frame = pd.read_csv(path, comment="#", header=None, names=["symbol", "hhi_production", "hhi_reserves"])
    frame["symbol"] = frame["symbol"].str.strip()
    # pymatgen's copy lists Bi twice; accept repeats only when they agree
    conflicting = frame.groupby("symbol")[["hhi_production", "hhi_reserves"]].nunique().gt(1).any(axis=1)
    if conflicting.any():
        raise ScreeningError(f"conflicting HHI rows for {', '.join(conflicting[conflicting].index)}",
                             source=str(path))
    return frame.drop_duplicates("symbol").set_index("symbol").astype(float)


_BIB_FIELD = re.compile(r'(\w+)\s*=\s*"([^"]*)"')


@lru_cache(maxsize=1)
def pymatgen_prices() -> pd.DataFrame:
    """pymatgen costdb_elements.csv: index symbol; price_usd_per_kg, source, year (from each row's citation)."""
    path = _pymatgen_file("costdb_elements.csv")
    rows = []
    for line in path.read_text(encoding="utf-8").splitlines():
        if not line.strip() or line.startswith("#"):
            continue
        data, _, citation = line.partition("|")
        symbol, price, *_ = data.split(",")
        fields = dict(_BIB_FIELD.findall(citation))
        rows.append({"symbol": symbol.strip(), "price_usd_per_kg": float(price),
                     "source": f"pymatgen costdb_elements.csv: {fields.get('title', '?')} "
                               f"({fields.get('month', '')} {fields.get('year', '')})".replace("( ", "("),
                     "year": int(fields["year"]) if fields.get("year", "").isdigit() else pd.NA})
    frame = pd.DataFrame(rows).drop_duplicates("symbol", keep="last").set_index("symbol")
    frame["year"] = frame["year"].astype("Int64")
    return frame


def _joined_by_symbol(frame: pd.DataFrame, column: str) -> pd.Series:
    mapped = frame[frame["symbol"] != ""]
    return mapped.groupby("symbol")[column].agg(lambda names: "; ".join(dict.fromkeys(names)))


@lru_cache(maxsize=1)
def _all_facts() -> pd.DataFrame:
    elements = load_ion_data().elements
    facts = pd.DataFrame(index=elements.index.copy())
    facts.index.name = "symbol"
    facts["atomic_mass"] = elements["atomic_mass"].astype(float)
    facts["abundance_crust_ppm"] = elements["abundance_crust_ppm"].astype(float)
    facts["abundance_source"] = np.where(facts["abundance_crust_ppm"].notna(), ABUNDANCE_SOURCE,
                                         "no crustal abundance in mendeleev")
    facts["price_usd_per_kg"] = elements["price_usd_per_kg"].astype(float)
    has_price = facts["price_usd_per_kg"].notna()
    facts["price_source"] = np.where(has_price, PRICE_SOURCE, "no price in mendeleev")
    facts["price_year"] = pd.array(np.where(has_price, PRICE_YEAR, 0), dtype="Int64")
    facts.loc[~has_price, "price_year"] = pd.NA

    alt = pymatgen_prices().reindex(facts.index)
    facts["price_pymatgen_usd_per_kg"] = alt["price_usd_per_kg"].astype(float)
    facts["price_pymatgen_source"] = alt["source"].fillna("not in pymatgen costdb_elements.csv")
    facts["price_pymatgen_year"] = alt["year"].astype("Int64")

    hhi = hhi_table().reindex(facts.index)
    facts["hhi_production"] = hhi["hhi_production"]
    facts["hhi_reserves"] = hhi["hhi_reserves"]
    facts["hhi_source"] = np.where(hhi["hhi_production"].notna(), HHI_SOURCE, "not in the Gaultois et al. table")

    facts["supply_risk"] = elements["supply_risk"].astype(float)
    facts["supply_risk_source"] = np.where(facts["supply_risk"].notna(), SUPPLY_RISK_SOURCE,
                                           "no relative supply risk in mendeleev")

    eu = eu_list()
    strategic = _joined_by_symbol(eu[eu["annex"] == "I"], "raw_material")
    critical = _joined_by_symbol(eu[eu["annex"] == "II"], "raw_material")
    facts["eu_strategic"] = facts.index.isin(strategic.index)
    facts["eu_critical"] = facts.index.isin(critical.index)
    facts["eu_strategic_as"] = strategic.reindex(facts.index).fillna("")
    facts["eu_critical_as"] = critical.reindex(facts.index).fillna("")
    usgs = _joined_by_symbol(usgs_list(), "mineral")
    facts["usgs_critical_2022"] = facts.index.isin(usgs.index)
    facts["usgs_critical_as"] = usgs.reindex(facts.index).fillna("")
    facts["listed"] = facts["eu_strategic"] | facts["eu_critical"] | facts["usgs_critical_2022"]

    facts["radioactive"] = elements["radioactive"].astype(bool)
    toxicity = toxicity_table().reindex(facts.index)
    facts["toxic"] = toxicity["caution"].notna()
    facts["toxicity_caution"] = toxicity["caution"].fillna("")
    facts["toxicity_basis"] = toxicity["basis"].fillna("")
    return facts


def element_facts(symbols=None) -> pd.DataFrame:
    """Scarcity, cost, supply and hazard facts per element, index symbol (all elements if ``symbols`` is None)."""
    facts = _all_facts()
    if symbols is None:
        return facts.copy()
    wanted = [symbols] if isinstance(symbols, str) else list(symbols)
    unknown = [s for s in dict.fromkeys(wanted) if s not in facts.index]
    if unknown:
        raise ScreeningError(f"unknown element symbol(s) {', '.join(map(str, unknown))}")
    return facts.loc[wanted].copy()


def hhi_designation(values) -> np.ndarray:
    """'low' / 'moderate' / 'high' per HHI value (DoJ/FTC 2010 bands); '' for NaN."""
    values = np.asarray(values, dtype=float)
    labels = np.select([values < HHI_BANDS[0][0], values <= HHI_BANDS[1][0], values > HHI_BANDS[1][0]],
                       [HHI_BANDS[0][1], HHI_BANDS[1][1], HHI_BANDS[2][1]], default="")
    return labels


# --- compositions --------------------------------------------------------------------------

def amounts_from_formulas(formulas, *, source: str = "formula") -> pd.DataFrame:
    """One row per formula (index = the formula text), one column per element, atoms per formula unit."""
    texts = pd.Index(list(formulas), dtype=object)
    parsed = {text: parse_formula(text, source=source) for text in dict.fromkeys(texts)}
    # parsing is per distinct formula string; everything after is one table
    table = pd.DataFrame.from_records(
        [{el: float(amount) for el, amount in parsed[text].items()} for text in texts], index=texts)
    return table.fillna(0.0)


def _check_amounts(amounts: pd.DataFrame) -> pd.DataFrame:
    if not isinstance(amounts, pd.DataFrame):
        raise ScreeningError("amounts must be a DataFrame (one row per composition, one column per element)")
    if amounts.shape[1] == 0:
        raise ScreeningError("amounts has no element columns")
    unknown = [str(c) for c in amounts.columns if c not in _all_facts().index]
    if unknown:
        raise ScreeningError(f"unknown element symbol(s) {', '.join(unknown)} as amount columns")
    try:
        values = amounts.astype(float)
    except (TypeError, ValueError) as exc:
        raise ScreeningError(f"amounts must be numbers (atoms per formula unit): {exc}") from None
    array = values.to_numpy()
    if not np.isfinite(array).all():
        raise ScreeningError("amounts hold NaN or infinite values; write 0 for an absent element")
    if (array < 0).any():
        raise ScreeningError("amounts must not be negative")
    empty = values.index[array.sum(axis=1) <= 0]
    if len(empty):
        raise ScreeningError(f"composition(s) with no element: {', '.join(map(str, empty[:5]))}")
    return values


def _require(facts: pd.DataFrame, present: pd.DataFrame, columns: list[str]) -> None:
    used = present.any(axis=0)
    problems = []
    for column in columns:
        lacking = used & facts[column].isna().reindex(present.columns).to_numpy()
        for symbol in present.columns[lacking]:
            first = present.index[present[symbol].to_numpy()][0]
            count = int(present[symbol].sum())
            problems.append(f"{symbol}: {column} (needed by {count} composition(s), e.g. {first})")
    if problems:
        raise DataMissingError("no value in the element data for " + "; ".join(problems)
                               + "; remove the element or supply the value")


def _joined_where(mask: pd.DataFrame) -> pd.Series:
    """';'-joined column names (sorted) where mask is True, per row; '' if none.

    Rows share few patterns (a screen's candidates list the same one or two critical
    elements over and over), so each distinct row pattern is joined once.
    """
    ordered = mask[sorted(mask.columns)]
    bits = ordered.to_numpy(dtype=bool)
    if bits.shape[1] == 0 or len(bits) == 0:
        return pd.Series("", index=mask.index, dtype="str")
    packed = np.ascontiguousarray(np.packbits(bits, axis=1))
    row_keys = packed.view(np.dtype((np.void, packed.shape[1]))).ravel()
    _, first, inverse = np.unique(row_keys, return_index=True, return_inverse=True)
    names = np.asarray(ordered.columns, dtype=object)
    labels = np.array([";".join(names[bits[row]]) for row in first], dtype=object)
    return pd.Series(labels[inverse.ravel()], index=mask.index, dtype="str")


def composition_metrics(amounts: pd.DataFrame) -> pd.DataFrame:
    """Molar mass, cost, mass-weighted HHI, scarcest element and listed elements per composition.

    ``amounts``: one row per composition, one column per element symbol, atoms
    per formula unit (0 where absent).  Raises DataMissingError naming the
    element and column if a needed value is missing.
    """
    values = _check_amounts(amounts)
    facts = _all_facts().loc[values.columns]
    present = values > 0
    _require(facts, present, sorted({c for cols in _NEEDED.values() for c in cols}))

    def vector(column: str) -> np.ndarray:
        # elements absent from every row may lack data; their weight is 0
        return facts[column].fillna(0.0).to_numpy(dtype=float)

    mass = values.to_numpy() * vector("atomic_mass")
    molar_mass = mass.sum(axis=1)
    weight = mass / molar_mass[:, None]
    cost_per_kg = weight @ vector("price_usd_per_kg")

    abundance = np.where(present.to_numpy(), facts["abundance_crust_ppm"].to_numpy(dtype=float), np.inf)
    scarcest = abundance.argmin(axis=1)

    result = pd.DataFrame({
        "molar_mass_g_mol": molar_mass,
        "cost_usd_per_kg": cost_per_kg,
        # USD/kg * g/mol / (1000 g/kg)
        "cost_usd_per_mol": cost_per_kg * molar_mass / 1000.0,
        "hhi_production": weight @ vector("hhi_production"),
        "hhi_reserves": weight @ vector("hhi_reserves"),
        "scarcest_element": values.columns.to_numpy()[scarcest].astype(str),
        "scarcest_abundance_ppm": abundance[np.arange(len(values)), scarcest],
    }, index=values.index)
    result["critical_elements"] = _joined_where(present & facts["listed"].to_numpy())
    result["radioactive_elements"] = _joined_where(present & facts["radioactive"].to_numpy())
    result["toxic_elements"] = _joined_where(present & facts["toxic"].to_numpy())
    return result


# --- rule set ------------------------------------------------------------------------------

def _scarcity_schema() -> dict:
    from screening.rulesets import schema

    return schema()["properties"]["scarcity"]


def validate_scarcity_rules(rules, *, source: str = "scarcity rules") -> dict:
    """Check a ``scarcity`` section against the rule-set schema; returns it with defaults filled in."""
    import jsonschema

    section_schema = _scarcity_schema()
    if not isinstance(rules, dict):
        raise ScreeningError(f"the scarcity section must be a mapping, got {type(rules).__name__}",
                             source=source, field="scarcity")
    errors = list(jsonschema.Draft202012Validator(section_schema).iter_errors(rules))
    if errors:
        error = sorted(errors, key=lambda e: list(map(str, e.absolute_path)))[0]
        if error.validator == "additionalProperties":
            extra = sorted(set(rules) - set(section_schema["properties"]))
            raise ScreeningError(f"unknown key(s) {', '.join(extra)}; allowed: "
                                 + ", ".join(section_schema["properties"]), source=source, field="scarcity")
        key = ".".join(["scarcity", *map(str, error.absolute_path)])
        raise ScreeningError(f"value {error.instance!r} is not allowed: {error.message}", source=source, field=key)
    filled = {key: sub.get("default") for key, sub in section_schema["properties"].items()}
    filled.update(rules)
    return filled


def load_scarcity_rules(path) -> dict:
    """The ``scarcity`` section of a YAML rule set (yaml.safe_load), checked against the rule-set schema."""
    import yaml

    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError("rule-set file not found", source=source)
    try:
        document = yaml.safe_load(path.read_text(encoding="utf-8"))
    except yaml.YAMLError as exc:
        raise ScreeningError(f"not valid YAML: {getattr(exc, 'problem', exc)}", source=source) from None
    if not isinstance(document, dict) or "scarcity" not in document:
        raise ScreeningError("the rule set has no 'scarcity' section", source=source, field="scarcity")
    return validate_scarcity_rules(document["scarcity"], source=source)


def threshold_checks(metrics: pd.DataFrame, rules: dict | None) -> pd.DataFrame:
    """Pass (True) / fail (False) per composition for each active threshold, plus ``passes`` (all of them).

    ``metrics`` is the output of :func:`composition_metrics`.  A threshold is
    active when it is not null; ``exclude_radioactive`` when it is true.
    """
    checks = pd.DataFrame(index=metrics.index)
    if rules is None:
        checks["passes"] = True
        return checks
    if rules.get("min_crust_ppm") is not None:
        checks["min_crust_ppm"] = metrics["scarcest_abundance_ppm"] >= rules["min_crust_ppm"]
    if rules.get("exclude_radioactive"):
        checks["exclude_radioactive"] = metrics["radioactive_elements"] == ""
    for key, column in (("max_cost_usd_per_kg", "cost_usd_per_kg"), ("max_hhi_production", "hhi_production"),
                        ("max_hhi_reserves", "hhi_reserves")):
        if rules.get(key) is not None:
            checks[key] = metrics[column] <= rules[key]
    checks["passes"] = checks.all(axis=1)
    return checks


def _check_value(key: str, metrics_row: pd.Series):
    return {"min_crust_ppm": metrics_row["scarcest_abundance_ppm"],
            "exclude_radioactive": [e for e in metrics_row["radioactive_elements"].split(";") if e],
            "max_cost_usd_per_kg": metrics_row["cost_usd_per_kg"],
            "max_hhi_production": metrics_row["hhi_production"],
            "max_hhi_reserves": metrics_row["hhi_reserves"]}[key]


# --- audits --------------------------------------------------------------------------------

def _plain(value):
    """JSON-ready scalar: NaN/NA -> None, numpy scalars -> Python."""
    if value is None or value is pd.NA:
        return None
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return None if math.isnan(value) else float(value)
    return value


def _rules_or_none(scarcity_rules):
    return None if scarcity_rules is None else validate_scarcity_rules(scarcity_rules)


def audit_formula(text: str, scarcity_rules: dict | None = None) -> dict:
    """Per-element rows, whole-material summary and pass/fail per threshold for one formula."""
    rules = _rules_or_none(scarcity_rules)
    composition: dict[str, Fraction] = parse_formula(text, source="formula")
    amounts = pd.DataFrame([{el: float(n) for el, n in composition.items()}], index=[text.strip()])
    metrics_frame = composition_metrics(amounts)
    metrics = metrics_frame.iloc[0]
    facts = element_facts(list(composition))
    masses = amounts.iloc[0] * facts["atomic_mass"]
    mass_fraction = masses / masses.sum()

    element_rows = []
    for symbol in composition:
        row = facts.loc[symbol]
        element_rows.append({
            "symbol": symbol,
            "amount": float(composition[symbol]),
            "mass_fraction": float(mass_fraction[symbol]),
            "abundance_crust_ppm": _plain(row["abundance_crust_ppm"]),
            "below_min_crust_ppm": (None if rules is None or rules["min_crust_ppm"] is None
                                    else bool(row["abundance_crust_ppm"] < rules["min_crust_ppm"])),
            "price_usd_per_kg": _plain(row["price_usd_per_kg"]),
            "price_source": row["price_source"],
            "price_year": _plain(row["price_year"]),
            "price_pymatgen_usd_per_kg": _plain(row["price_pymatgen_usd_per_kg"]),
            "price_pymatgen_source": row["price_pymatgen_source"],
            "price_pymatgen_year": _plain(row["price_pymatgen_year"]),
            "hhi_production": _plain(row["hhi_production"]),
            "hhi_reserves": _plain(row["hhi_reserves"]),
            "supply_risk": _plain(row["supply_risk"]),
            "supply_risk_source": row["supply_risk_source"],
            "eu_strategic": bool(row["eu_strategic"]),
            "eu_strategic_as": row["eu_strategic_as"],
            "eu_critical": bool(row["eu_critical"]),
            "eu_critical_as": row["eu_critical_as"],
            "usgs_critical_2022": bool(row["usgs_critical_2022"]),
            "radioactive": bool(row["radioactive"]),
            "toxic": bool(row["toxic"]),
            "toxicity_caution": row["toxicity_caution"],
        })

    scarcest = metrics["scarcest_element"]
    others = facts["abundance_crust_ppm"].drop(scarcest)
    reason = (f"{scarcest} has the lowest crustal abundance of the elements present, "
              f"{metrics['scarcest_abundance_ppm']:.3g} ppm (CRC Handbook via mendeleev)")
    if len(others):
        reason += f"; next is {others.idxmin()} at {others.min():.3g} ppm"
    summary = {
        "molar_mass_g_mol": float(metrics["molar_mass_g_mol"]),
        "cost_usd_per_kg": float(metrics["cost_usd_per_kg"]),
        "cost_usd_per_mol": float(metrics["cost_usd_per_mol"]),
        "hhi_production": float(metrics["hhi_production"]),
        "hhi_production_band": str(hhi_designation([metrics["hhi_production"]])[0]),
        "hhi_reserves": float(metrics["hhi_reserves"]),
        "hhi_reserves_band": str(hhi_designation([metrics["hhi_reserves"]])[0]),
        "scarcest_element": scarcest,
        "scarcest_abundance_ppm": float(metrics["scarcest_abundance_ppm"]),
        "scarcest_reason": reason,
        "critical_elements": [s for s in metrics["critical_elements"].split(";") if s],
        "radioactive_elements": [s for s in metrics["radioactive_elements"].split(";") if s],
        "toxic_elements": [s for s in metrics["toxic_elements"].split(";") if s],
    }
    checks_frame = threshold_checks(metrics_frame, rules).iloc[0]
    checks = [{"rule": key, "threshold": rules[key], "value": _plain(_check_value(key, metrics)),
               "passed": bool(checks_frame[key])}
              for key in SCARCITY_KEYS if key in checks_frame.index]
    return {
        "formula": text.strip(),
        "composition": {el: float(n) for el, n in composition.items()},
        "elements": element_rows,
        "summary": summary,
        "rules": rules,
        "checks": checks,
        "passed": bool(checks_frame["passes"]) if checks else None,
        "sources": _sources(),
    }


def _sources() -> dict:
    return {"abundance": ABUNDANCE_SOURCE, "price": PRICE_SOURCE, "hhi": HHI_SOURCE,
            "supply_risk": SUPPLY_RISK_SOURCE, "eu": EU_SOURCE, "usgs": USGS_SOURCE,
            "toxicity": f"{TOXICITY_FILE.name}: GHS classes after EU CLP Annex VI, from memory",
            "radioactive": "mendeleev is_radioactive"}


REQUIRED_SHORTLIST_COLUMNS = ("host", "formula")


def read_shortlist(path) -> pd.DataFrame:
    """A shortlist CSV with at least the columns host and formula; 'line' gives each row's line in the file."""
    path = Path(path)
    source = str(path)
    if not path.is_file():
        raise ScreeningError("shortlist file not found", source=source)
    try:
        frame = pd.read_csv(path, dtype=str, keep_default_na=False, skip_blank_lines=True)
    except pd.errors.EmptyDataError:
        raise ScreeningError("the shortlist is empty (no header line)", source=source) from None
    except pd.errors.ParserError as exc:
        raise ScreeningError(f"not a readable CSV: {exc}", source=source) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    missing = [c for c in REQUIRED_SHORTLIST_COLUMNS if c not in frame.columns]
    if missing:
        raise ScreeningError(f"missing required column(s) {', '.join(missing)}; found: "
                             + (", ".join(frame.columns) or "none"), source=source)
    if frame.empty:
        raise ScreeningError("the shortlist has a header but no candidates", source=source)
    frame = frame.reset_index(drop=True)
    frame["line"] = np.arange(len(frame)) + 2  # header is line 1
    blank = frame["formula"].str.strip() == ""
    if blank.any():
        raise ScreeningError("empty formula", source=f"{source} line {int(frame.loc[blank, 'line'].iloc[0])}",
                             field="formula")
    return frame


def audit_shortlist(path, scarcity_rules: dict | None = None) -> dict:
    """One row per candidate, and how often each scarce or listed element appears."""
    rules = _rules_or_none(scarcity_rules)
    frame = read_shortlist(path)
    source = str(path)
    formulas = frame["formula"].str.strip()
    # each distinct formula is parsed once, with the line of its first use for the message
    first_line = frame.groupby(formulas, sort=False)["line"].first()
    parsed = {text: parse_formula(text, source=f"{source} line {int(first_line[text])}") for text in first_line.index}
    amounts = pd.DataFrame.from_records(
        [{el: float(n) for el, n in parsed[text].items()} for text in formulas], index=frame.index).fillna(0.0)
    metrics = composition_metrics(amounts)
    checks = threshold_checks(metrics, rules)

    candidates = pd.concat([frame[["line", "host"]], formulas.rename("formula"), metrics,
                            checks.add_prefix("pass_")], axis=1)
    candidates = candidates.rename(columns={"pass_passes": "passes"})
    if rules is None:
        candidates = candidates.drop(columns="passes")

    present = amounts > 0
    facts = _all_facts().loc[amounts.columns]
    scarce = (facts["abundance_crust_ppm"] < rules["min_crust_ppm"]
              if rules is not None and rules["min_crust_ppm"] is not None
              else pd.Series(False, index=facts.index))
    flagged = facts["listed"] | facts["radioactive"] | facts["toxic"] | scarce
    counts = present.sum(axis=0)
    summary = pd.DataFrame({
        "symbol": facts.index,
        "candidates": counts.to_numpy(),
        "eu_strategic": facts["eu_strategic"].to_numpy(),
        "eu_critical": facts["eu_critical"].to_numpy(),
        "usgs_critical_2022": facts["usgs_critical_2022"].to_numpy(),
        "below_min_crust_ppm": scarce.to_numpy(),
        "radioactive": facts["radioactive"].to_numpy(),
        "toxic": facts["toxic"].to_numpy(),
        "abundance_crust_ppm": facts["abundance_crust_ppm"].to_numpy(),
    })
    summary = summary[flagged.to_numpy() & (counts.to_numpy() > 0)]
    summary = summary.sort_values(["candidates", "symbol"], ascending=[False, True]).reset_index(drop=True)

    def records(table: pd.DataFrame) -> list[dict]:
        return [{k: _plain(v) for k, v in row.items()} for row in table.to_dict(orient="records")]

    return {
        "shortlist": source,
        "rules": rules,
        "checks": [key for key in SCARCITY_KEYS if key in checks.columns],
        "candidates": records(candidates),
        "summary": {
            "n_candidates": int(len(frame)),
            "n_passed": int(checks["passes"].sum()) if rules is not None else None,
            "elements": records(summary),
        },
        "sources": _sources(),
    }
