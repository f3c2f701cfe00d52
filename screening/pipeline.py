"""The stages of a screen as plain functions; the Snakefile calls each through a thin rule.

prepare_hosts   host library -> checked hosts, split in shards (JSON)
screen_shard    enumerate placements, single-ion rules, pairs, charge balance, composition scarcity
edge_shard      Butler–Ginley band edges, absorption onset, STH limit
rank            alignment at the rule set's pH, alignment rule, score and rank
assemble        shortlist.csv, rejected.parquet, funnel.csv

Each function takes file paths and exactly the rule-set sections it uses, so
that a change of one criterion reruns only the stages that depend on it.
Files are written atomically (temporary name, then rename), so no stage ever
reads a half-written file.
"""
from __future__ import annotations

import contextlib
import json
import logging
import threading
import time
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd

from screening import bands, enumerate as enum, hosts as hostlib, pools, solar
from screening.filters import charge_balance, empty_rejected, oxidation_state, radius_mismatch
from screening.filters import scarcity as scarcity_rules
from screening.files import atomic_write
from screening.shards import shard_count

FUNNEL_COLUMNS = ["host", "rule", "enumerated", "candidates_in", "candidates_out", "removed"]
log = logging.getLogger("screening")


# --- file helpers ------------------------------------------------------------------------

@contextlib.contextmanager
def stage_log(path, stage: str):
    """Log a stage's start, end, wall time and outcome to its Snakemake log file."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    handler = logging.FileHandler(path, mode="w", encoding="utf-8")
    handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)s %(message)s"))
    # Local runs execute stages in threads of one process: keep each log to its own stage.
    thread = threading.get_ident()
    handler.addFilter(lambda record: record.thread == thread)
    logger = logging.getLogger("screening")
    logger.addHandler(handler)
    logger.setLevel(logging.INFO)
    start = time.perf_counter()
    logger.info("stage %s started", stage)
    try:
        yield logger
    except Exception:
        logger.exception("stage %s failed", stage)
        raise
    else:
        logger.info("stage %s finished in %.2f s", stage, time.perf_counter() - start)
    finally:
        logger.removeHandler(handler)
        handler.close()


def write_parquet(frame: pd.DataFrame, path) -> None:
    atomic_write(path, lambda tmp: frame.to_parquet(tmp, index=False))


def write_csv(frame: pd.DataFrame, path) -> None:
    atomic_write(path, lambda tmp: frame.to_csv(tmp, index=False, lineterminator="\n", float_format="%.6g"))


def write_json(document, path) -> None:
    atomic_write(path, lambda tmp: Path(tmp).write_text(json.dumps(document, indent=2, sort_keys=True) + "\n"))


# --- stage 1: hosts ----------------------------------------------------------------------

def prepare_hosts(hosts_file, shard_size: int, out_json, structures=None) -> list[hostlib.Host]:
    """Checked hosts in shards; ``structures``: the rule set's CIF file or folder (issue 4), or None."""
    from screening import structures as structlib

    hosts, skipped = structlib.combined_hosts(hosts_file, structures)
    records = hostlib.hosts_to_records(hosts)
    n = shard_count(len(hosts), shard_size)
    for i, record in enumerate(records):
        record["shard"] = i // shard_size
    document = {"hosts_file": str(hosts_file), "library_sha256": hostlib.library_hash(hosts_file),
                "shards": n, "hosts": records}
    if structures is not None:
        # skipped structures reach the funnel through shard 0 (see screen_shard)
        document.update({"structures": str(structures), "structures_sha256": structlib.structures_hash(structures),
                         "skipped_structures": skipped})
    write_json(document, out_json)
    return hosts


def read_hosts(hosts_json, shard: int | None = None) -> dict[str, hostlib.Host]:
    document = json.loads(Path(hosts_json).read_text())
    records = [r for r in document["hosts"] if shard is None or r["shard"] == shard]
    for r in records:
        r.pop("shard", None)
    return {h.id: h for h in hostlib.hosts_from_records(records)}


# --- stage 2: enumerate and filter -------------------------------------------------------

def _implied_count(placed_types: pd.DataFrame, members: pd.DataFrame, host_ids, enumeration: dict) -> pd.Series:
    """Candidates per host that per-site-type placements would give, without building the pairs.

    ``placed_types``: placements of :func:`screening.enumerate.site_types` (``host`` = type number);
    ``members``: the host sites of each type.  A host's singles are its placements; its pairs are
    its acceptors times its donors, over all of its sites.
    """
    n_types = int(members["site_type"].max()) + 1 if len(members) else 0
    row_type = placed_types["host"].to_numpy(np.int64)
    delta = placed_types["delta"].to_numpy(np.int64)
    member_type = members["site_type"].to_numpy(np.int64)
    host_of_member = pd.Index(list(host_ids)).get_indexer(members["host"])

    def per_host(mask) -> np.ndarray:
        per_type = np.bincount(row_type[mask], minlength=n_types)
        return np.bincount(host_of_member, weights=per_type[member_type], minlength=len(host_ids)).astype(np.int64)

    count = np.zeros(len(host_ids), dtype=np.int64)
    if enumeration["singles"]:
        count += per_host(np.ones(len(row_type), dtype=bool))
    if enumeration["pairs"]:
        count += per_host(delta < 0) * per_host(delta > 0)
    return pd.Series(count, index=list(host_ids), dtype=np.int64)


def _funnel_rows(rule: str, before: pd.Series, after: pd.Series) -> pd.DataFrame:
    after = after.reindex(before.index, fill_value=0)
    return pd.DataFrame({"host": before.index, "rule": rule, "candidates_in": before.to_numpy(),
                         "candidates_out": after.to_numpy(), "removed": (before - after).to_numpy()})


def screen_shard(hosts_json, shard: int, pool_file, enumeration: dict, filters: dict, scarcity: dict,
                 kept_out, rejected_out, funnel_out) -> pd.DataFrame:
    hosts = read_hosts(hosts_json, shard)
    host_ids = sorted(hosts)
    pool = pools.pool_ions(pools.load_pool(pool_file))
    host_list = list(hosts.values())
    sites = hostlib.sites_frame(host_list)
    anion_dopants = enumeration.get("anion_dopants")
    if anion_dopants:
        # issue 4: N3-, F-, S2- on the oxide-ion site, screened by the same single-ion rules
        sites = pd.concat([sites, enum.anion_sites_frame(host_list)], ignore_index=True)
    # the single-ion rules judge each ion once per distinct site, not once per host
    types, members = enum.site_types(sites)
    cation_types = types["site_charge"].to_numpy() > 0
    placed = enum.placements(types[cation_types], pool)
    if anion_dopants:
        anion = enum.anion_site_placements(types[~cation_types], anion_dopants)
        placed = (pd.concat([placed, anion], ignore_index=True)
                  .sort_values(enum.PLACEMENT_KEY).reset_index(drop=True))

    funnel, rejected = [], []
    count = _implied_count(placed, members, host_ids, enumeration)
    enumerated = count
    for rule, apply_rule in (
            ("oxidation_state", lambda p: oxidation_state.apply(p, filters["oxidation_state"])),
            ("radius_mismatch", lambda p: radius_mismatch.apply(p, filters["radius_mismatch"])),
            ("radioactive", lambda p: scarcity_rules.apply_radioactive(p, scarcity)),
            ("abundance", lambda p: scarcity_rules.apply_abundance(p, scarcity))):
        placed, removed = apply_rule(placed)
        rejected.append(enum.expand_to_hosts(removed, members))
        new_count = _implied_count(placed, members, host_ids, enumeration)
        funnel.append(_funnel_rows(rule, count, new_count))
        count = new_count
    placed = enum.expand_to_hosts(placed, members)

    dopant_fraction = Fraction(str(enumeration["dopant_fraction"]))
    candidates = enum.combine(placed, enumeration, dopant_fraction)
    if len(candidates) != int(count.sum()):
        raise AssertionError(f"pair count {len(candidates)} differs from the implied count {int(count.sum())}")
    candidates, removed = charge_balance.apply(candidates, filters["charge_balance"])
    rejected.append(removed)
    after = candidates.groupby("host").size()
    funnel.append(_funnel_rows("charge_balance", count, after))
    count = after.reindex(host_ids, fill_value=0)

    if filters.get("lattice") is not None:
        # Goldschmidt t and Bartel tau of the doped ABO3 compositions (issue 4)
        from screening.filters import tolerance

        candidates, removed = tolerance.apply(candidates, hosts, filters["lattice"])
        rejected.append(removed)
        after = candidates.groupby("host").size()
        funnel.append(_funnel_rows("tolerance", count, after))
        count = after.reindex(host_ids, fill_value=0)

    amounts = enum.candidate_amounts(candidates, hosts)
    candidates, removed, metrics = scarcity_rules.apply_composition(candidates, amounts, scarcity)
    if removed is not None:
        rejected.append(removed)
    for rule, key in scarcity_rules.COMPOSITION_RULES.items():
        if scarcity[key] is None:
            continue
        gone = (removed[removed["rule"] == rule].groupby("host").size()
                .reindex(host_ids, fill_value=0).astype(np.int64))
        funnel.append(_funnel_rows(rule, count, count - gone))
        count = count - gone
    kept = pd.concat([candidates.reset_index(drop=True), metrics.reset_index(drop=True)], axis=1)
    log.info("shard %d: %d hosts, %d candidates enumerated, %d kept", shard, len(hosts),
             int(enumerated.sum()), len(kept))
    write_parquet(kept, kept_out)
    skipped = json.loads(Path(hosts_json).read_text()).get("skipped_structures", []) if shard == 0 else []
    if skipped:
        from screening import structures as structlib

        skipped_funnel, skipped_rejected = structlib.skipped_rows(skipped)
        rejected.append(skipped_rejected)
    frames = [r for r in rejected if r is not None and len(r)]
    write_parquet(pd.concat(frames, ignore_index=True) if frames else empty_rejected(), rejected_out)
    funnel_frame = pd.concat(funnel, ignore_index=True)
    funnel_frame.insert(2, "enumerated", funnel_frame["host"].map(enumerated))
    if skipped:
        funnel_frame = pd.concat([skipped_funnel, funnel_frame], ignore_index=True)
    write_csv(funnel_frame, funnel_out)
    return kept


# --- stage 3: band edges -----------------------------------------------------------------

def edge_shard(hosts_json, shard: int, kept_file, radius_limit: float, edges_out) -> pd.DataFrame:
    """Raw and calibrated band edges (pH 0) with their sigma, dopant-level onset, STH limit, in-gap risk,
    and the site likelihood of each candidate's ions.

    Everything here is a property of the composition; the one rule-set value it takes is the radius
    mismatch ceiling ``radius_limit``, the width of the site likelihood's radius weight.  The rule set's
    pH, margins and the raw/calibrated switch act in :func:`rank`, so a change of ranking weights
    recomputes none of this (the site likelihood was most of the rank stage's time).
    """
    from screening import calibration as calib, dopant_levels, ingap, site_preference

    hosts = read_hosts(hosts_json, shard)
    kept = pd.read_parquet(kept_file)
    amounts = enum.candidate_amounts(kept, hosts) if len(kept) else pd.DataFrame()
    gap = kept["host"].map({h: host.gap_ev for h, host in hosts.items()}).to_numpy(float)
    chi = bands.electronegativity_of_amounts(amounts) if len(kept) else np.array([])
    cbm, vbm = bands.band_edges(chi, gap, ph=0.0)
    cbm, vbm = np.atleast_1d(cbm), np.atleast_1d(vbm)
    cal = calib.load_calibration()
    if len(kept):
        cbm_cal, vbm_cal, cbm_sigma, vbm_sigma = calib.calibrated_edges(cbm, vbm, gap, ph=0.0, calibration=cal)
    else:
        cbm_cal = vbm_cal = cbm_sigma = vbm_sigma = np.array([])
    # the uncalibrated estimate's own error, for rule sets that switch the calibration off
    raw_sigma = float(np.sqrt(np.mean((np.array(cal.raw_cbm_v) - np.array(cal.measured_cbm_v)) ** 2)))
    host_formula = kept["host"].map({h: host.formula for h, host in hosts.items()})
    levels = dopant_levels.candidate_onsets(kept, host_formula, gap, cal)
    risk = ingap.candidate_risk(kept, hosts)
    onset = levels["onset_ev"].to_numpy(float)
    edges = pd.DataFrame({
        "candidate_id": kept["candidate_id"].to_numpy(), "chi_ev": chi,
        "cbm_v_nhe_ph0": cbm, "vbm_v_nhe_ph0": vbm,
        "cbm_cal_v_nhe_ph0": np.atleast_1d(cbm_cal), "vbm_cal_v_nhe_ph0": np.atleast_1d(vbm_cal),
        "cbm_sigma_cal_v": np.atleast_1d(cbm_sigma), "vbm_sigma_cal_v": np.atleast_1d(vbm_sigma),
        "sigma_raw_v": np.full(len(kept), raw_sigma),
        # outside the raw-CBM span of the reference rows the calibration fitted, its line and sigma are an
        # extrapolation (README, "Band edges": the wide-gap vacuum rows argue against it there)
        "calibration_extrapolated": (cbm < min(cal.raw_cbm_v)) | (cbm > max(cal.raw_cbm_v)),
        "host_gap_ev": gap, "onset_ev": onset,
        "level_flag": levels["level_flag"].to_numpy(str), "level_note": levels["level_note"].to_numpy(str),
        "level_same_host": levels["level_same_host"].to_numpy(bool),
        "ingap_risk": risk["ingap_risk"].to_numpy(str), "ingap_reason": risk["ingap_reason"].to_numpy(str),
        "sth_limit": solar.sth_limit(onset) if len(kept) else np.array([]),
    })
    # issue 4: which site each ion prefers (Hautier 2011 substitution probability x radius match)
    preference = site_preference.candidate_likelihoods(kept, hosts, max(float(radius_limit), 1e-3))
    edges["site_likelihood"] = preference["site_likelihood"].to_numpy(float)
    edges["preferred_site"] = preference["preferred_site"].to_numpy(bool)
    write_parquet(edges, edges_out)
    return edges


# --- stage 4: rank -----------------------------------------------------------------------

STH_REFERENCE = 0.179
"""STH limit of a 2.0 eV absorber under AM1.5G, the usual single-absorber target: the STH term's unit."""
MARGIN_SCALE_V = 0.5
COST_DECADES = 4.0
ABUNDANCE_DECADES = 6.0


def score_terms(frame: pd.DataFrame, strain_limit: float) -> pd.DataFrame:
    """Dimensionless terms of the score (larger is better), on fixed scales so reruns compare."""
    from screening import ingap

    strain = np.fmax(frame["dopant_mismatch"].to_numpy(float),
                     np.nan_to_num(frame["codopant_mismatch"].to_numpy(float), nan=0.0))
    return pd.DataFrame({
        # expected STH: the limit of the onset times the probability that the edges reach water splitting
        "term_sth": frame["expected_sth"].to_numpy(float) / STH_REFERENCE,
        "term_alignment": np.clip(frame["alignment_margin_v"].to_numpy(float) / MARGIN_SCALE_V, -1, 1),
        "term_cost": -np.log10(np.fmax(frame["cost_usd_per_kg"].to_numpy(float), 1e-2)) / COST_DECADES,
        "term_abundance": np.log10(np.fmax(frame["scarcest_abundance_ppm"].to_numpy(float), 1e-6))
        / ABUNDANCE_DECADES,
        "term_strain": -strain / strain_limit if strain_limit > 0 else -strain,
        "term_ingap": ingap.risk_penalty(frame["ingap_risk"].to_numpy(str)),
    }, index=frame.index)


def rank(hosts_json, kept_files, edge_files, alignment: dict, ranking: dict, strain_limit: float,
         ranked_out, rejected_out, funnel_out) -> pd.DataFrame:
    hosts = read_hosts(hosts_json)
    kept = pd.concat([pd.read_parquet(f) for f in kept_files], ignore_index=True)
    edges = pd.concat([pd.read_parquet(f) for f in edge_files], ignore_index=True)
    frame = kept.merge(edges, on="candidate_id", how="inner", validate="one_to_one")
    if len(frame) != len(kept):
        raise AssertionError("band-edge stage lost candidates")
    ph = float(alignment["ph"])
    shift = -bands.NERNST_SLOPE_V * ph
    # cbm_v_nhe / vbm_v_nhe stay the raw Butler–Ginley edges (as in earlier shortlists); the alignment
    # uses the calibrated ones unless the rule set switches the calibration off
    frame["cbm_v_nhe"] = frame["cbm_v_nhe_ph0"] + shift
    frame["vbm_v_nhe"] = frame["vbm_v_nhe_ph0"] + shift
    frame["cbm_calibrated_v_nhe"] = frame["cbm_cal_v_nhe_ph0"] + shift
    frame["vbm_calibrated_v_nhe"] = frame["vbm_cal_v_nhe_ph0"] + shift
    calibrated = bool(alignment["calibrated_edges"])
    cbm_used = frame["cbm_calibrated_v_nhe" if calibrated else "cbm_v_nhe"].to_numpy(float)
    sigma = frame["cbm_sigma_cal_v" if calibrated else "sigma_raw_v"].to_numpy(float)
    frame["cbm_sigma_v"] = sigma
    frame["vbm_sigma_v"] = frame["vbm_sigma_cal_v"].to_numpy(float) if calibrated else sigma
    # highest occupied level: the dopant level onset_ev below the CBM, or the VBM where onset = gap
    frame["occupied_level_v_nhe"] = cbm_used + frame["onset_ev"].to_numpy(float)
    her, oer = bands.alignment_margins(cbm_used, frame["occupied_level_v_nhe"], ph,
                                       alignment["her_overpotential_v"], alignment["oer_overpotential_v"])
    frame["her_margin_v"], frame["oer_margin_v"] = her, oer
    mode = alignment["mode"]
    margin = {"overall": np.minimum(her, oer), "hydrogen": her, "oxygen": oer}[mode]
    frame["alignment_margin_v"] = margin
    # a level transferred from other hosts carries their edge error, independent of this host's
    shared = frame["level_flag"].to_numpy(str) != "transferred"
    frame["alignment_probability"] = bands.alignment_probability(her, oer, sigma, sigma, shared, mode)
    frame["expected_sth"] = frame["sth_limit"].to_numpy(float) * frame["alignment_probability"].to_numpy(float)

    from screening.filters import alignment as alignment_rule

    frame, removed = alignment_rule.apply(frame, alignment)
    host_ids = sorted(hosts)
    before = kept.groupby("host").size().reindex(host_ids, fill_value=0)
    after = frame.groupby("host").size().reindex(host_ids, fill_value=0)
    write_csv(_funnel_rows("alignment", before, after), funnel_out)
    write_parquet(removed, rejected_out)

    weights = ranking["weights"]
    terms = score_terms(frame, strain_limit)
    frame = pd.concat([frame, terms], axis=1)
    frame["score"] = sum(weights[name] * terms[f"term_{name}"] for name in weights)
    frame = frame.sort_values(["score", "candidate_id"], ascending=[False, True], kind="stable")
    frame["rank"] = np.arange(1, len(frame) + 1)
    if ranking["top"] is not None:
        frame = frame.head(int(ranking["top"]))
    frame["formula"] = enum.candidate_formulas(frame, hosts)
    log.info("ranked %d candidates (%d removed by alignment)", len(frame), len(removed))
    write_parquet(frame.reset_index(drop=True), ranked_out)
    return frame


# --- stage 5: assemble outputs -----------------------------------------------------------

SHORTLIST_COLUMNS = [
    "rank", "candidate_id", "host", "dopant", "dopant_site", "codopant", "codopant_site", "ratio",
    "compensation", "defects", "formula", "dopant_fraction", "codopant_fraction", "dopant_mismatch",
    "codopant_mismatch", "radius_estimated", "site_likelihood", "preferred_site", "chi_ev", "cbm_v_nhe",
    "vbm_v_nhe", "cbm_calibrated_v_nhe",
    "vbm_calibrated_v_nhe", "cbm_sigma_v", "vbm_sigma_v", "calibration_extrapolated", "occupied_level_v_nhe", "her_margin_v", "oer_margin_v",
    "alignment_probability", "onset_ev", "level_flag", "level_note", "sth_limit", "expected_sth", "ingap_risk",
    "ingap_reason", "cost_usd_per_kg", "hhi_production", "scarcest_element", "critical_elements",
    "score",
]


def assemble(ranked_file, rejected_files, funnel_files, shortlist_out, rejected_out, funnel_out) -> None:
    ranked = pd.read_parquet(ranked_file).rename(columns={"dopant_ion": "dopant", "codopant_ion": "codopant"})
    ranked["radius_estimated"] = ranked["dopant_radius_estimated"] | ranked["codopant_radius_estimated"]
    missing = [c for c in SHORTLIST_COLUMNS if c not in ranked.columns]
    if missing:
        raise AssertionError(f"ranked candidates lack the shortlist column(s) {missing}")
    write_csv(ranked[SHORTLIST_COLUMNS], shortlist_out)
    _stream_rejected(rejected_files, rejected_out)
    funnel = pd.concat([pd.read_csv(f, keep_default_na=False) for f in funnel_files], ignore_index=True)
    order = {rule: i for i, rule in enumerate(FUNNEL_ORDER)}
    funnel = funnel.assign(_order=funnel["rule"].map(order)).sort_values(["host", "_order"], kind="stable")
    enumerated = funnel.groupby("host")["enumerated"].max()
    funnel["enumerated"] = funnel["host"].map(enumerated).astype(np.int64)
    write_csv(funnel.drop(columns="_order"), funnel_out)


def _rejected_schema():
    import pyarrow as pa

    text = ["host", "dopant", "dopant_site", "codopant", "codopant_site", "rule", "scope", "detail", "candidate_id"]
    fields = [pa.field(c, pa.string()) for c in text[:6]] + [pa.field("value", pa.float64()),
                                                              pa.field("threshold", pa.float64())]
    return pa.schema(fields + [pa.field(c, pa.string()) for c in text[6:]])


def _stream_rejected(rejected_files, rejected_out) -> None:
    """Concatenate the stage rejection files one at a time, so memory stays that of the largest shard."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = _rejected_schema()
    sort_keys = ["host", "rule", "dopant", "dopant_site", "codopant", "codopant_site"]

    def write(tmp):
        with pq.ParquetWriter(tmp, schema) as writer:
            for path in rejected_files:
                frame = pd.read_parquet(path)
                if not len(frame):
                    continue
                frame = frame.reindex(columns=schema.names)
                for name in schema.names:
                    if name not in ("value", "threshold"):
                        frame[name] = frame[name].astype(object).where(frame[name].notna(), None)
                frame = frame.sort_values(sort_keys, kind="stable")
                writer.write_table(pa.Table.from_pandas(frame, schema=schema, preserve_index=False))

    atomic_write(rejected_out, write)


FUNNEL_ORDER = ["structure", "oxidation_state", "radius_mismatch", "radioactive", "abundance", "charge_balance",
                "tolerance", "cost",
                "hhi_production", "hhi_reserves", "alignment"]
