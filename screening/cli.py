"""Command line: ``screening run | edges | audit``.

Heavy libraries are imported inside the commands, so ``--help`` stays fast.
Bad input of any kind ends in one line on stderr and exit status 2.
"""
from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from screening.errors import ScreeningError

REPO_ROOT = Path(__file__).resolve().parents[1]
SNAKEFILE = REPO_ROOT / "workflow" / "Snakefile"
DEFAULT_RULES = REPO_ROOT / "rules" / "default.yaml"


def _run_parser(sub) -> None:
    p = sub.add_parser("run", help="run a screen through the Snakemake workflow",
                       description="Run a screen: enumerate, filter, estimate band edges, rank. "
                                   "Writes shortlist.csv, rejected.parquet and funnel.csv under --out.")
    p.add_argument("--rules", type=Path, default=DEFAULT_RULES, help="rule-set YAML (default: rules/default.yaml)")
    p.add_argument("--out", type=Path, default=None, help="results folder (default: results/<rule-set name>)")
    p.add_argument("--cores", type=int, default=2, help="parallel jobs (default 2)")
    p.add_argument("--dry-run", action="store_true", help="show the plan, run nothing")
    p.add_argument("--snakemake-args", default="", help="extra arguments passed to snakemake, quoted")


def _edges_parser(sub) -> None:
    p = sub.add_parser("edges", help="Butler–Ginley band edges and STH limit of one formula",
                       description="Compound electronegativity, CBM and VBM (V vs NHE) and the AM1.5G STH "
                                   "limit for a formula and its band gap.")
    p.add_argument("formula", help="e.g. TiO2 or Sr0.98La0.02Ti0.98Cr0.02O3")
    p.add_argument("--gap", type=float, required=True, help="band gap or absorption onset, eV")
    p.add_argument("--ph", type=float, default=0.0, help="pH for the NHE potentials (default 0)")
    p.add_argument("--json", action="store_true", help="print one JSON object")


def build_parser(argv: list[str] | None = None) -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="screening",
        description="Shortlist dopant and codopant pairs for wide-gap oxide hosts as visible-light "
                    "absorbers for solar water splitting.")
    parser.add_argument("--version", action="version", version=_version())
    sub = parser.add_subparsers(dest="command", required=True)
    _run_parser(sub)
    _edges_parser(sub)
    # Only the sub-command being run imports its module (they pull in pandas); the others
    # are listed by name and help line, which keeps `screening --help` fast.
    words = sys.argv[1:] if argv is None else argv
    chosen = next((w for w in words if not w.startswith("-")), None)
    for name, help_line in COMMAND_MODULES.items():
        if name == chosen:
            _command_module(name).register(sub)
        else:
            sub.add_parser(name, help=help_line, add_help=False)
    return parser


# Sub-commands that live in their own module, each with register(subparsers) and run(args) -> int,
# with the help line shown by `screening --help`.
COMMAND_MODULES = {
    "audit": "scarcity, cost and supply audit of a formula or a shortlist",
    "calibration": "the band-edge calibration: reference rows, leave-one-out error, plot",
    "diff": "compare two results folders: provenance, then candidates that entered, left or moved",
    "explain": "every rule a candidate met, its defects and the numbers behind its score",
}
# a command whose module is not screening.<command> (screening.calibration is the fit itself)
MODULE_OF_COMMAND = {"calibration": "calibration_plot"}


def _command_module(name: str):
    import importlib

    return importlib.import_module(f"screening.{MODULE_OF_COMMAND.get(name, name)}")


def _version() -> str:
    from screening import __version__

    return f"screening {__version__}"


def cmd_edges(args) -> int:
    """Raw Butler–Ginley edges (the keys cbm_v_nhe / vbm_v_nhe, unchanged) and the calibrated edges with sigma."""
    from screening import bands, calibration, solar
    from screening.formulas import parse_formula

    if not 0 < args.gap <= 12:
        raise ScreeningError(f"--gap must be a band gap in eV from 0 to 12, got {args.gap}")
    if not 0 <= args.ph <= 14:
        raise ScreeningError(f"--ph must be from 0 to 14, got {args.ph}")
    composition = parse_formula(args.formula, source="formula")
    chi = bands.electronegativity(composition)
    cbm, vbm = bands.band_edges(chi, args.gap, ph=args.ph)
    cal = calibration.load_calibration()
    cbm_cal, vbm_cal, cbm_sigma, vbm_sigma = calibration.calibrated_edges(cbm, vbm, args.gap, ph=args.ph,
                                                                          calibration=cal)
    sth = float(solar.sth_limit(args.gap))
    result = {"formula": args.formula, "gap_ev": args.gap, "ph": args.ph, "chi_ev": round(chi, 4),
              "cbm_v_nhe": round(cbm, 4), "vbm_v_nhe": round(vbm, 4),
              "cbm_calibrated_v_nhe": round(cbm_cal, 4), "vbm_calibrated_v_nhe": round(vbm_cal, 4),
              "cbm_sigma_v": round(cbm_sigma, 4), "vbm_sigma_v": round(vbm_sigma, 4),
              "calibration": {"model": cal.model, "slope": round(cal.slope, 4),
                              "intercept_v": round(cal.intercept, 4), "n_reference": cal.n,
                              "loo_rmse_v": round(cal.loo_rmse_v, 4), "loo_mae_v": round(cal.loo_mae_v, 4),
                              "data_version": cal.data_version},
              "sth_limit": round(sth, 5), "free_electron_ev": bands.FREE_ELECTRON_EV}
    if args.json:
        print(json.dumps(result))
    else:
        scale = f"V vs NHE at pH {args.ph:g}"
        print(f"{args.formula}: chi = {chi:.3f} eV (Butler–Ginley, E_e = {bands.FREE_ELECTRON_EV} eV), "
              f"gap {args.gap:g} eV")
        print(f"  raw Butler–Ginley:  CBM {cbm:+.3f}, VBM {vbm:+.3f} {scale}")
        print(f"  calibrated:         CBM {cbm_cal:+.3f} ± {cbm_sigma:.3f}, VBM {vbm_cal:+.3f} ± {vbm_sigma:.3f} "
              f"{scale}")
        print(f"    ({cal.model}, {cal.n} measured edges, slope {cal.slope:.3f}, intercept {cal.intercept:+.3f} V; "
              f"± is the leave-one-out RMSE, one sigma; data {cal.data_version})")
        print(f"  STH limit (AM1.5G, unit quantum yield): {100 * sth:.2f} %")
    return 0


def cmd_run(args) -> int:
    from screening import progress

    # Snakemake's import (~2 s) runs in its own process while the input is checked (~1 s).
    early = progress.EarlyWorkflow()
    try:
        return _run_checked(args, early)
    finally:
        if early.process.returncode is None and not early.process.stdin.closed:
            early.discard()  # the input was refused (or Ctrl-C): the process never got its arguments


def _run_checked(args, early) -> int:
    import shlex

    from screening import pools, progress, rulesets, structures

    # Check everything that enters before any work, so bad input leaves nothing behind.
    rules = rulesets.load_ruleset(args.rules)
    hosts, _ = structures.load_screen_hosts(rules)  # the host library plus the rule set's CIF structures
    pools.load_pool(rules.pool_path)
    if args.cores < 1:
        raise ScreeningError(f"--cores must be at least 1, got {args.cores}")
    advice = shard_advice(len(hosts), rules.sections["workflow"]["shard_size"], args.cores, args.snakemake_args)
    if advice:
        print(advice, file=sys.stderr)
    out = (args.out or Path("results") / rules.name).resolve()
    from screening import provenance

    provenance.prepare_run(rules, out, args)
    if not SNAKEFILE.is_file():
        raise ScreeningError(f"workflow file not found at {SNAKEFILE} (install the package from a checkout "
                             "with `pip install -e .`)")
    # handed to screening.snakemake_main: Snakemake's own command line, started early, ending sooner
    command = ["--snakefile", str(SNAKEFILE), "--cores", str(args.cores),
               "--directory", str(out), "--config", f"ruleset={rules.path}", f"out={out}",
               "--rerun-incomplete", "--quiet", "rules",
               # stages run in threads of one process: no interpreter start-up per job
               "--force-use-threads"]
    if args.dry_run:
        command.append("--dry-run")
    command += shlex.split(args.snakemake_args)
    out.mkdir(parents=True, exist_ok=True)
    # Snakemake's output is held back (and printed whole on failure); a long run shows a status line.
    returncode = progress.run_workflow(command, out, after_s=progress.delay_from_env(), echo=args.dry_run,
                                       early=early)
    if returncode != 0:
        print(f"screening: the workflow failed (exit {returncode}); see {out}/logs", file=sys.stderr)
        return 1
    if not args.dry_run:
        print(f"screening: shortlist written to {out / 'shortlist.csv'}")
    return 0


def shard_advice(n_hosts: int, shard_size: int, cores: int, snakemake_args: str) -> str | None:
    """A note when a local run has over twice the shards of :func:`screening.shards.local_shard_size`;
    None otherwise, and for cluster runs (a profile or an executor)."""
    import shlex

    from screening import shards

    if any(token == "-e" or token.startswith(("--profile", "--executor", "-e="))
           for token in shlex.split(snakemake_args)):
        return None
    better = shards.local_shard_size(n_hosts, cores)
    count = shards.shard_count(n_hosts, shard_size)
    if count <= 2 * shards.shard_count(n_hosts, better):
        return None
    return (f"screening: note: {count} shards of {shard_size} hosts on {cores} core(s); on one machine about "
            f"{shards.shard_count(n_hosts, better)} run faster (Snakemake's cost per job grows with the number "
            f"of jobs): set workflow.shard_size to about {better} in the rule set")


def main(argv: list[str] | None = None) -> int:
    parser = build_parser(argv)
    args = parser.parse_args(argv)
    try:
        if args.command == "run":
            return cmd_run(args)
        if args.command == "edges":
            return cmd_edges(args)
        return _command_module(args.command).run(args)
    except ScreeningError as exc:
        print(f"screening: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        # Snakemake has already marked unfinished outputs incomplete; a rerun resumes.
        print("screening: interrupted; run the same command again to resume", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
