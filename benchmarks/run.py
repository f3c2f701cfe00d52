"""Benchmark of the screen (run by hand; not part of the tests' pass or fail).

    .venv/bin/python benchmarks/run.py                 # everything: ratio, scaling 10/100/1000, end to end, --help
    .venv/bin/python benchmarks/run.py --sizes 10,100  # a shorter scaling series
    .venv/bin/python benchmarks/run.py --only ratio    # one part: ratio | scaling | e2e | help

Parts
-----
ratio    candidates per second through enumeration and the charge, radius and
         abundance rules (plus oxidation state, radioactivity and cost, which
         both sides apply) for (a) the pipeline's shard stage and (b) the plain
         per-candidate reference in ``reference_screen.py``, on the same hosts
         (pipeline: median of 5 runs after a warm-up; reference: one run);
         prints the ratio and checks that both keep the same candidates.
         The synthetic hosts repeat the library's sites, as real libraries do
         (the pipeline judges each ion once per distinct site);
         ``--distinct-sites`` gives every host site a type of its own, the
         pipeline's worst case.
scaling  the whole workflow (``screening run``) on synthetic host libraries of
         10, 100 and 1,000 hosts, with wall time and peak memory (largest
         resident set of the child processes, from ``resource``); shard size
         from ``screening.shards.local_shard_size`` (about 4 shards a core).  A synthetic
         library repeats the hosts of ``candidates/hosts.yaml`` in order, each
         copy with the id ``<id>-s<k>`` and its gap moved by a fixed, repeating
         offset (-0.2 to +0.2 eV in 0.05 eV steps), so that per-host work is that
         of real hosts.
e2e      the default screen end to end from a cold cache (fresh ion-table cache
         and results folder), then ``--reruns`` times again (default 5), each after
         a change to the ranking weights only; median and range.
help     ``screening --help`` wall time (median of 5).

Before the scaling series starts, the memory it needs is estimated from a fixed
base plus a per-host figure (measured on this machine, see MEMORY_PER_HOST_MB);
a size whose estimate exceeds the available memory is refused up front.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import yaml

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "benchmarks"))
BIN = Path(sys.executable).parent
# From this script's scaling series on the 2-core development machine (README, "Speed and scale"):
# peak RSS was 331, 423 and 605 MB at 10, 100 and 1,000 hosts (2026-12-02), about 0.2 MB a host
# at the margin.  The estimate keeps a fivefold margin on that growth: the gathering stages hold
# every survivor at once, and how they grow past 1,000 hosts was not measured.
MEMORY_BASE_MB = 600.0
MEMORY_PER_HOST_MB = 1.0


def available_memory_mb() -> float:
    for line in Path("/proc/meminfo").read_text().splitlines():
        if line.startswith("MemAvailable:"):
            return int(line.split()[1]) / 1024
    raise RuntimeError("cannot read MemAvailable from /proc/meminfo")


def synthetic_library(n_hosts: int, path: Path, distinct_sites: bool = False) -> Path:
    """``distinct_sites``: give every host's sites labels of their own (``Ti`` of host 7 becomes ``Ti0007``),
    so that no two hosts share a site type and the single-ion rules run once per host site: the
    pipeline's worst case (a real library shares sites: all its titanates have the same Ti4+(VI) site)."""
    library = yaml.safe_load((REPO / "candidates" / "hosts.yaml").read_text())
    base = library["hosts"]
    offsets = [-0.2, -0.15, -0.1, -0.05, 0.0, 0.05, 0.1, 0.15, 0.2]
    hosts = []
    for k in range(n_hosts):
        host = dict(base[k % len(base)])
        host["id"] = f"{host['id']}-s{k}"
        host["gap_ev"] = round(host["gap_ev"] + offsets[k % len(offsets)], 3)
        if distinct_sites:
            # fixed-width host number after the element, then the site's own number (Ga1 -> Ga00071)
            host["sites"] = [{**site, "label": site["element"] + f"{k:04d}"
                              + site.get("label", site["element"])[len(site["element"]):]}
                             for site in host["sites"]]
        hosts.append(host)
    path.write_text(yaml.safe_dump({"library": f"synthetic-{n_hosts}", "version": 1, "hosts": hosts},
                                   sort_keys=False))
    return path


def rules_copy(directory: Path, hosts_file: Path | None = None, **changes) -> Path:
    rules = yaml.safe_load((REPO / "rules" / "default.yaml").read_text())
    rules["hosts"] = str(hosts_file or REPO / "candidates" / "hosts.yaml")
    rules["dopant_pool"] = str(REPO / "candidates" / "pools" / "default.yaml")
    for dotted, value in changes.items():
        node = rules
        *parents, last = dotted.split("__")
        for key in parents:
            node = node.setdefault(key, {})
        node[last] = value
    path = directory / "rules.yaml"
    path.write_text(yaml.safe_dump(rules, sort_keys=False))
    return path


def timed_child(command: list[str], env: dict | None = None) -> tuple[float, float, int]:
    """Wall seconds, peak RSS (MB) of the largest child, exit status; run in a fresh measuring process."""
    probe = ("import resource, subprocess, sys, time, json\n"
             "t = time.perf_counter(); r = subprocess.run(sys.argv[1:], stdout=subprocess.DEVNULL)\n"
             "print(json.dumps([time.perf_counter() - t, "
             "resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024, r.returncode]))")
    out = subprocess.run([sys.executable, "-c", probe, *command], capture_output=True, text=True,
                         env={**os.environ, **(env or {})}, check=True)
    wall, peak, code = json.loads(out.stdout.strip().splitlines()[-1])
    return wall, peak, code


PIPELINE_RUNS = 5


def part_ratio(n_hosts: int, distinct_sites: bool = False) -> dict:
    from reference_screen import reference_screen

    from screening import pipeline, rulesets

    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        hosts_file = synthetic_library(n_hosts, tmp / "hosts.yaml", distinct_sites)
        rules = rulesets.load_ruleset(rules_copy(tmp, hosts_file))
        hosts = pipeline.prepare_hosts(hosts_file, n_hosts, tmp / "hosts.json")
        sections = [rules.section(s) for s in ("enumeration", "filters", "scarcity")]
        pipeline.screen_shard(tmp / "hosts.json", 0, rules.pool_path, *sections, tmp / "k.parquet",
                              tmp / "r.parquet", tmp / "f.csv")  # warm caches (ion table, element facts)
        # the pipeline's second is at the mercy of the machine's other work: the median of five runs
        # (the reference's 90 s average that out by themselves)
        runs = []
        for _ in range(PIPELINE_RUNS):
            start = time.perf_counter()
            kept = pipeline.screen_shard(tmp / "hosts.json", 0, rules.pool_path, *sections, tmp / "k.parquet",
                                         tmp / "r.parquet", tmp / "f.csv")
            runs.append(time.perf_counter() - start)
        pipeline_s = statistics.median(runs)
        import pandas as pd

        funnel = pd.read_csv(tmp / "f.csv")
        enumerated = int(funnel.groupby("host")["enumerated"].first().sum())
        reference_screen(hosts[:1], rules.pool_path, *sections)  # warm
        start = time.perf_counter()
        ref_enumerated, ref_kept = reference_screen(hosts, rules.pool_path, *sections)
        reference_s = time.perf_counter() - start
    same = set(kept["candidate_id"]) == ref_kept and ref_enumerated == enumerated
    result = {"hosts": n_hosts, "distinct_sites": distinct_sites, "candidates": enumerated, "pipeline_s": pipeline_s, "pipeline_runs_s": runs,
              "reference_s": reference_s,
              "pipeline_per_s": enumerated / pipeline_s, "reference_per_s": enumerated / reference_s,
              "ratio": reference_s / pipeline_s, "kept": len(kept), "same_result": same}
    print(f"ratio: {n_hosts} hosts{' (every site its own type)' if distinct_sites else ''}, "
          f"{enumerated} candidates; pipeline {pipeline_s:.2f} s "
          f"(median of {', '.join(f'{r:.2f}' for r in runs)}) "
          f"({result['pipeline_per_s']:.3g}/s), reference {reference_s:.2f} s ({result['reference_per_s']:.3g}/s); "
          f"ratio {result['ratio']:.0f}x; same kept set: {same} ({len(kept)} kept)")
    if not same:
        print("ratio: WARNING the reference and the pipeline disagree; the ratio is not meaningful", file=sys.stderr)
    return result


def part_scaling(sizes: list[int], cores: int) -> list[dict]:
    from screening import shards

    available = available_memory_mb()
    for n in sizes:
        estimate = MEMORY_BASE_MB + MEMORY_PER_HOST_MB * n
        if estimate > available:
            raise SystemExit(f"scaling: {n} hosts would need about {estimate:.0f} MB by this benchmark's estimate "
                             f"({MEMORY_BASE_MB:.0f} MB + {MEMORY_PER_HOST_MB:g} MB per host); only "
                             f"{available:.0f} MB are available. Not started.")
    results = []
    for n in sizes:
        with tempfile.TemporaryDirectory() as tmp:
            tmp = Path(tmp)
            hosts_file = synthetic_library(n, tmp / "hosts.yaml")
            rules = rules_copy(tmp, hosts_file, name=f"scale{n}", workflow__shard_size=shards.local_shard_size(n, cores))
            wall, peak, code = timed_child([str(BIN / "screening"), "run", "--rules", str(rules), "--out",
                                            str(tmp / "out"), "--cores", str(cores)])
            rows = sum(1 for _ in open(tmp / "out" / "shortlist.csv")) - 1 if code == 0 else -1
        results.append({"hosts": n, "wall_s": wall, "peak_mb": peak, "exit": code, "shortlisted": rows})
        print(f"scaling: {n:5d} hosts  {wall:7.1f} s  peak {peak:7.0f} MB  exit {code}  shortlist {rows} rows "
              f"({wall / n * 1000:.0f} ms/host)")
    return results


RERUN_WEIGHTS = [{"sth": 1.0, "alignment": 0.8, "cost": cost, "abundance": 0.2, "strain": 0.2}
                 for cost in (0.3, 0.35, 0.4, 0.45, 0.5, 0.55, 0.6, 0.65, 0.7, 0.75)]
"""Ranking weights of the successive reruns: only the cost weight moves, so each rerun is a real change."""


def part_e2e(cores: int, reruns: int = 5) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        env = {"SCREENING_CACHE_DIR": str(tmp / "cache")}
        rules = rules_copy(tmp)
        command = [str(BIN / "screening"), "run", "--rules", str(rules), "--out", str(tmp / "out"),
                   "--cores", str(cores)]
        cold, cold_peak, code1 = timed_child(command, env)
        times, codes = [], []
        for weights in RERUN_WEIGHTS[:reruns]:
            rules_copy(tmp, ranking__weights=weights)
            seconds, _, code = timed_child(command, env)
            times.append(seconds)
            codes.append(code)
    print(f"e2e: default screen cold {cold:.1f} s (peak {cold_peak:.0f} MB, exit {code1}); "
          f"after a ranking-weight change: median {statistics.median(times):.1f} s, "
          f"range {min(times):.1f}-{max(times):.1f} s over {len(times)} reruns "
          f"({', '.join(f'{t:.1f}' for t in times)}; exits {sorted(set(codes))})")
    return {"cold_s": cold, "rerun_ranking_s": times, "rerun_ranking_median_s": statistics.median(times),
            "exit": [code1, *codes]}


def part_help() -> dict:
    times = []
    for _ in range(5):
        start = time.perf_counter()
        subprocess.run([str(BIN / "screening"), "--help"], stdout=subprocess.DEVNULL, check=True)
        times.append(time.perf_counter() - start)
    print(f"help: screening --help median {statistics.median(times):.2f} s over 5 runs")
    return {"help_s": statistics.median(times)}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--sizes", default="10,100,1000", help="host counts of the scaling series")
    parser.add_argument("--ratio-hosts", type=int, default=100, help="hosts for the pipeline/reference ratio")
    parser.add_argument("--distinct-sites", action="store_true",
                        help="ratio part: no two synthetic hosts share a site (the pipeline's worst case)")
    parser.add_argument("--cores", type=int, default=2)
    parser.add_argument("--reruns", type=int, default=5, choices=range(1, len(RERUN_WEIGHTS) + 1),
                        metavar=f"1-{len(RERUN_WEIGHTS)}", help="reruns after a ranking-weight change (e2e part)")
    parser.add_argument("--only", choices=["ratio", "scaling", "e2e", "help"], action="append")
    parser.add_argument("--json", type=Path, help="also write the results to this JSON file")
    args = parser.parse_args()
    parts = args.only or ["ratio", "scaling", "e2e", "help"]
    sizes = [int(s) for s in args.sizes.split(",") if s]
    if "scaling" in parts:  # refuse up front, before any other part runs
        for n in sizes:
            if MEMORY_BASE_MB + MEMORY_PER_HOST_MB * n > available_memory_mb():
                part_scaling([n], args.cores)
    results = {"machine": {"cores": os.cpu_count(), "available_mb": round(available_memory_mb())}}
    if "ratio" in parts:
        results["ratio"] = part_ratio(args.ratio_hosts, args.distinct_sites)
    if "scaling" in parts:
        results["scaling"] = part_scaling(sizes, args.cores)
    if "e2e" in parts:
        results["e2e"] = part_e2e(args.cores, args.reruns)
    if "help" in parts:
        results["help"] = part_help()
    if args.json:
        args.json.write_text(json.dumps(results, indent=2))


if __name__ == "__main__":
    main()
