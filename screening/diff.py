"""``screening diff RESULTS_A RESULTS_B``: what a change of criteria did to the shortlist.

Provenance first (rule-set criteria, data tables, packages, inputs that differ),
then the candidates that entered, left or moved in rank. Each entry or exit
carries the rule, value and threshold that made the difference, read from the
other side's ``rejected.parquet`` (the record every rule leaves, see README,
"Output files"): a candidate that left B is explained by B's rejection, one
that entered B by what had removed it in A. The comparison is a keyed join of
the two shortlists on ``candidate_id`` (a relational set difference, common
practice); nothing is written.

Two folders screened on different host libraries are refused: their
candidate sets differ by construction, not by a criterion.
"""
from __future__ import annotations

import json
import math
import sys
from pathlib import Path

import numpy as np
import pandas as pd

from screening import provenance
from screening.errors import ScreeningError

COMPARED_COLUMNS = ["score", "sth_limit", "her_margin_v", "oer_margin_v", "cbm_v_nhe", "vbm_v_nhe", "onset_ev",
                    "cost_usd_per_kg", "hhi_production", "dopant_mismatch", "codopant_mismatch"]
ION_KEY = ["host", "dopant", "dopant_site"]


def register(subparsers) -> None:
    p = subparsers.add_parser(
        "diff", help="compare two results folders: provenance, then candidates that entered, left or moved",
        description="Compare two results folders of `screening run`: provenance differences first, then the "
                    "candidates that entered, left or moved in rank, each with the rule, value and threshold "
                    "that made the difference. Writes nothing.")
    p.add_argument("results_a", type=Path, metavar="RESULTS_A", help="results folder of the first screen")
    p.add_argument("results_b", type=Path, metavar="RESULTS_B", help="results folder of the second screen")
    p.add_argument("--json", action="store_true", help="print one JSON object")


def run(args) -> int:
    result = compare(args.results_a, args.results_b)
    if args.json:
        print(json.dumps(result, indent=2, ensure_ascii=False))
    else:
        sys.stdout.write(format_text(result))
    return 0


# --- reading ---------------------------------------------------------------------------------

def _load(folder: Path) -> dict:
    folder = Path(folder)
    if not folder.is_dir():
        raise ScreeningError("not a results folder (no such directory)", source=str(folder))
    shortlist_file, rejected_file = folder / "shortlist.csv", folder / "rejected.parquet"
    for path in (shortlist_file, rejected_file):
        if not path.is_file():
            raise ScreeningError("missing; is this the folder of a finished `screening run`?", source=str(path))
    try:
        shortlist = pd.read_csv(shortlist_file, dtype={"codopant": str, "codopant_site": str}, keep_default_na=False,
                                na_values={c: [""] for c in COMPARED_COLUMNS})
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise ScreeningError(f"not a readable CSV ({exc})", source=str(shortlist_file)) from None
    missing = {"rank", "candidate_id", "host", "dopant", "dopant_site", "codopant", "codopant_site"} - set(shortlist)
    if missing:
        raise ScreeningError(f"not a shortlist: column(s) {', '.join(sorted(missing))} missing",
                             source=str(shortlist_file))
    try:
        rejected = pd.read_parquet(rejected_file)
    except Exception as exc:  # pyarrow raises several types for a damaged file; all mean the same to the user
        raise ScreeningError(f"not a readable Parquet file ({type(exc).__name__}: {exc})",
                             source=str(rejected_file)) from None
    for column in ("codopant", "codopant_site", "candidate_id", "detail"):
        if column in rejected:
            rejected[column] = rejected[column].fillna("")
    record = provenance.read(folder)
    library = record["host_library"] if record and "host_library" in record else _library_from_stages(folder)
    return {"folder": folder, "shortlist": shortlist, "rejected": rejected, "provenance": record,
            "library": library}


def _library_from_stages(folder: Path) -> dict | None:
    hosts_json = folder / "stages" / "hosts.json"
    if not hosts_json.is_file():
        return None
    document = json.loads(hosts_json.read_text())
    return {"path": document.get("hosts_file"), "sha256": document.get("library_sha256")}


# --- provenance ------------------------------------------------------------------------------

def _flatten(record: dict) -> dict:
    from screening.rulesets import flatten

    flat = flatten(record)
    # the criteria list the text key by key; the hash says whether the text changed at all
    return {k: v for k, v in flat.items() if k != "ruleset.text" and k not in provenance.VOLATILE}


def provenance_differences(a: dict | None, b: dict | None) -> list[dict]:
    if a is None or b is None:
        if a is None and b is None:
            return []
        return [{"key": "provenance.json", "a": "present" if a else "missing", "b": "present" if b else "missing"}]
    fa, fb = _flatten(a), _flatten(b)
    order = ["ruleset.", "host_library.", "dopant_pool.", "data.", "packages.", "command", "format"]

    def rank(key):
        return next((i for i, prefix in enumerate(order) if key.startswith(prefix)), len(order)), key

    return [{"key": k, "a": fa.get(k), "b": fb.get(k)} for k in sorted(set(fa) | set(fb), key=rank)
            if fa.get(k) != fb.get(k)]


def _check_same_library(a: dict, b: dict) -> None:
    la, lb = a["library"], b["library"]
    if la and lb and la.get("sha256") and lb.get("sha256") and la["sha256"] != lb["sha256"]:
        raise ScreeningError(
            f"the two folders were screened on different host libraries: {a['folder']} on {la.get('path')} "
            f"(sha256 {la['sha256'][:12]}…), {b['folder']} on {lb.get('path')} (sha256 {lb['sha256'][:12]}…); "
            "their candidates differ by host, not by a criterion, so they are not compared. "
            "Rerun both rule sets on one host library")


# --- candidates ------------------------------------------------------------------------------

def _rule_order() -> dict:
    from screening.pipeline import FUNNEL_ORDER

    return {rule: i for i, rule in enumerate(FUNNEL_ORDER)}


def _reasons(candidates: pd.DataFrame, rejected: pd.DataFrame) -> dict[str, list[dict]]:
    """Rejection rows of another screen that match each candidate: its own, or its ions' on their sites."""
    if candidates.empty or rejected.empty:
        return {}
    fields = ["rule", "value", "threshold", "scope", "detail"]
    whole = rejected[rejected["scope"] == "candidate"]
    ions = rejected[rejected["scope"] == "ion"][ION_KEY + fields]
    keys = candidates[["candidate_id", "host", "dopant", "dopant_site", "codopant", "codopant_site"]]
    frames = [keys[["candidate_id"]].merge(whole[["candidate_id"] + fields], on="candidate_id")]
    frames.append(keys[["candidate_id"] + ION_KEY].merge(ions, on=ION_KEY)
                  .assign(ion=lambda f: f["dopant"], site=lambda f: f["dopant_site"]))
    as_codopant = keys[keys["codopant"] != ""].rename(columns={"dopant": "_d", "dopant_site": "_ds"})
    as_codopant = as_codopant.rename(columns={"codopant": "dopant", "codopant_site": "dopant_site"})
    frames.append(as_codopant[["candidate_id"] + ION_KEY].merge(ions, on=ION_KEY)
                  .assign(ion=lambda f: f["dopant"], site=lambda f: f["dopant_site"]))
    found = pd.concat([f.reindex(columns=["candidate_id", *fields, "ion", "site"]) for f in frames],
                      ignore_index=True)
    order = _rule_order()
    found["_order"] = found["rule"].map(order).fillna(len(order))
    found = found.sort_values(["candidate_id", "_order", "rule"], kind="stable")
    out: dict[str, list[dict]] = {}
    for candidate_id, rows in found.groupby("candidate_id", sort=False):
        out[candidate_id] = [_clean({k: row[k] for k in (*fields, "ion", "site")}) for _, row in rows.iterrows()]
    return out


def _clean(entry: dict) -> dict:
    for key, value in list(entry.items()):
        if isinstance(value, (float, np.floating)):
            entry[key] = None if math.isnan(value) else float(value)
        elif value is None or (key in ("ion", "site") and not isinstance(value, str)):
            entry[key] = None
    return entry


def _not_rejected_reason(side: dict, label: str) -> dict:
    record = side["provenance"] or {}
    top = record.get("ruleset", {}).get("criteria", {}).get("ranking.top")
    if top is not None and len(side["shortlist"]) >= int(top):
        return {"rule": "ranking.top", "value": None, "threshold": float(top), "scope": "candidate",
                "detail": f"ranked below the top {int(top)} kept in {label}", "ion": None, "site": None}
    return {"rule": "not_enumerated", "value": None, "threshold": None, "scope": "candidate",
            "detail": f"not enumerated in {label} (dopant pool or enumeration settings)", "ion": None,
            "site": None}


def _value(v):
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return None
    return v.item() if isinstance(v, np.generic) else v


def compare(folder_a, folder_b) -> dict:
    a, b = _load(folder_a), _load(folder_b)
    _check_same_library(a, b)
    sa, sb = a["shortlist"], b["shortlist"]
    ids_a, ids_b = set(sa["candidate_id"]), set(sb["candidate_id"])
    entered = sb[~sb["candidate_id"].isin(ids_a)].sort_values("rank")
    left = sa[~sa["candidate_id"].isin(ids_b)].sort_values("rank")
    both = sa.merge(sb, on="candidate_id", suffixes=("_a", "_b"), validate="one_to_one")

    why_not_in_a = _reasons(entered, a["rejected"])
    why_not_in_b = _reasons(left, b["rejected"])
    entered_rows = [{"candidate_id": r.candidate_id, "rank_b": int(r.rank), "score_b": _value(r.score),
                     "reasons_in_a": why_not_in_a.get(r.candidate_id) or [_not_rejected_reason(a, "A")]}
                    for r in entered.itertuples()]
    left_rows = [{"candidate_id": r.candidate_id, "rank_a": int(r.rank), "score_a": _value(r.score),
                  "reasons_in_b": why_not_in_b.get(r.candidate_id) or [_not_rejected_reason(b, "B")]}
                 for r in left.itertuples()]

    moved = both[both["rank_a"] != both["rank_b"]].copy()
    moved["_shift"] = (moved["rank_a"] - moved["rank_b"]).abs()
    moved = moved.sort_values(["_shift", "rank_b"], ascending=[False, True], kind="stable")
    entered_ranks = np.sort(entered["rank"].to_numpy())
    left_ranks = np.sort(left["rank"].to_numpy())
    columns = [c for c in COMPARED_COLUMNS if f"{c}_a" in both and f"{c}_b" in both]
    moved_rows = []
    for _, r in moved.iterrows():
        changes = {c: {"a": _value(r[f"{c}_a"]), "b": _value(r[f"{c}_b"])} for c in columns
                   if not _same(r[f"{c}_a"], r[f"{c}_b"])}
        moved_rows.append({
            "candidate_id": r["candidate_id"], "rank_a": int(r["rank_a"]), "rank_b": int(r["rank_b"]),
            "changed": changes,
            # counts of candidates that entered or left ahead of this one: a rank can move with no change of its own
            "entered_above": int(np.searchsorted(entered_ranks, r["rank_b"])),
            "left_above": int(np.searchsorted(left_ranks, r["rank_a"])),
        })
    return {
        "a": str(a["folder"]), "b": str(b["folder"]),
        "provenance": provenance_differences(a["provenance"], b["provenance"]),
        "counts": {"a": len(sa), "b": len(sb), "entered": len(entered_rows), "left": len(left_rows),
                   "moved": len(moved_rows), "unchanged": int(len(both) - len(moved_rows))},
        "entered": entered_rows, "left": left_rows, "moved": moved_rows,
    }


def _same(x, y) -> bool:
    x, y = _value(x), _value(y)
    if x is None or y is None:
        return x is None and y is None
    return x == y


# --- text ------------------------------------------------------------------------------------

def _short(value) -> str:
    if value is None:
        return "–"
    if isinstance(value, float):
        return f"{value:.6g}"
    text = str(value)
    return text if len(text) <= 60 else text[:57] + "..."


def _reason_text(reason: dict) -> str:
    detail = reason.get("detail") or ""
    if detail:
        return f"{reason['rule']}: {detail}"
    return f"{reason['rule']} {_short(reason.get('value'))} vs {_short(reason.get('threshold'))}"


def format_text(result: dict) -> str:
    lines = [f"A: {result['a']}", f"B: {result['b']}", ""]
    lines.append("Provenance differences (A -> B):")
    if not result["provenance"]:
        lines.append("  none")
    for item in result["provenance"]:
        lines.append(f"  {item['key']}: {_short(item['a'])} -> {_short(item['b'])}")
    c = result["counts"]
    lines += ["", f"Shortlist: A {c['a']}, B {c['b']} candidates; {c['entered']} entered, {c['left']} left, "
                  f"{c['moved']} moved, {c['unchanged']} unchanged", ""]
    lines.append("Entered (in B, not in A; what removed it in A):")
    lines += [f"  {r['rank_b']:>5}  {r['candidate_id']}  <- " + "; ".join(map(_reason_text, r["reasons_in_a"]))
              for r in result["entered"]] or ["  none"]
    lines += ["", "Left (in A, not in B; what removed it in B):"]
    lines += [f"  {r['rank_a']:>5}  {r['candidate_id']}  -> " + "; ".join(map(_reason_text, r["reasons_in_b"]))
              for r in result["left"]] or ["  none"]
    lines += ["", "Moved (rank A -> rank B):"]
    for r in result["moved"]:
        if r["changed"]:
            why = ", ".join(f"{k} {_short(v['a'])} -> {_short(v['b'])}" for k, v in r["changed"].items())
        else:
            why = (f"own values unchanged; {r['entered_above']} entered and {r['left_above']} left above it")
        lines.append(f"  {r['rank_a']:>5} -> {r['rank_b']:<5} {r['candidate_id']}  ({why})")
    if not result["moved"]:
        lines.append("  none")
    return "\n".join(lines) + "\n"
