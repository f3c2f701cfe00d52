"""Provenance of a results folder: what produced it, written as ``provenance.json``.

The record follows the idea of the W3C PROV model (an entity, the activity
that generated it and what that activity used; W3C Recommendation PROV-DM,
2013) in a flat JSON form: the rule set (path, SHA-256 and full text, plus
every criterion after defaults), the host library and dopant pool (path and
SHA-256), the ion-table version and the SHA-256 of every data table shipped
with the package, the versions of Python and of the packages that compute
results, and the command line.

The workflow's last rule writes the record (``workflow/Snakefile``, rule
``provenance``), so every results folder gets one, whether the screen was
started by ``screening run`` or by Snakemake directly (for example on a
cluster). Versions are those of the run that last wrote the record: a
package upgrade alone reruns nothing, so after one use ``--forceall``.

:func:`check_results_folder` guards a folder against the results of a
*different* rule-set file that happens to carry the same ``name``.
"""
from __future__ import annotations

import datetime as _dt
import hashlib
import json
import os
import platform
import shlex
from importlib import metadata
from pathlib import Path

from screening.errors import ScreeningError

FILE_NAME = "provenance.json"
FORMAT = 1
COMMAND_ENV = "SCREENING_COMMAND"
"""Environment variable that carries the command line from ``screening run`` into the workflow."""
PACKAGE_DIR = Path(__file__).resolve().parent
PACKAGES = ("screening", "snakemake", "pandas", "numpy", "pyarrow", "scipy", "mendeleev", "pymatgen",
            "jsonschema", "PyYAML")
VOLATILE = ("written_utc",)
"""Fields that differ between two runs of the same inputs by nature; diffs leave them out."""


def sha256_file(path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def shipped_data_files() -> list[Path]:
    """Data tables the package reads (beside the modules that use them)."""
    files = [p for p in (PACKAGE_DIR / "data").iterdir() if p.suffix in (".csv", ".json", ".dat", ".yaml")]
    files += list((PACKAGE_DIR / "filters").glob("*.csv"))
    return sorted(files, key=lambda p: p.relative_to(PACKAGE_DIR).as_posix())


def package_versions() -> dict[str, str]:
    versions = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            versions[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            versions[name] = "not installed"
    return versions


def record(rules, command: str | None = None) -> dict:
    """The provenance of a screen with rule set ``rules`` (a :class:`screening.rulesets.RuleSet`)."""
    from screening import ions, rulesets

    if command is None:
        command = os.environ.get(COMMAND_ENV, "")
    return {
        "format": FORMAT,
        "ruleset": {"name": rules.name, "path": str(rules.path), "sha256": rules.sha256, "text": rules.text,
                    "criteria": rulesets.flat_sections(rules.sections)},
        "host_library": {"path": str(rules.hosts_path), "sha256": sha256_file(rules.hosts_path)},
        "dopant_pool": {"path": str(rules.pool_path), "sha256": sha256_file(rules.pool_path)},
        "data": {"ion_tables": ions.data_version(),
                 "files": {p.relative_to(PACKAGE_DIR).as_posix(): sha256_file(p) for p in shipped_data_files()}},
        "packages": package_versions(),
        "command": command,
        "written_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
    }


def write(rules, path) -> dict:
    from screening.pipeline import write_json

    document = record(rules)
    write_json(document, path)
    return document


def read(folder) -> dict | None:
    """The record of a results folder; None if it has none; an error if it is unreadable."""
    path = Path(folder) / FILE_NAME
    if not path.is_file():
        return None
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise ScreeningError(f"not a readable provenance record ({exc})", source=str(path)) from None
    if not isinstance(document, dict) or not isinstance(document.get("ruleset"), dict):
        raise ScreeningError("not a provenance record (no 'ruleset' mapping)", source=str(path))
    return document


def check_results_folder(rules, out, *, explicit_out: bool) -> None:
    """Refuse to write a rule set's default folder when it holds another rule-set file's results.

    Two rule-set files with the same ``name`` both default to ``results/<name>/``;
    a second run would overwrite the first's results without a word. The folder's
    record names the rule-set file that produced it; a different file stops the
    run before any work. An explicit ``--out`` is the user's own choice of folder
    and is not refused (the record is rewritten by the run).
    """
    previous = read(out)
    if previous is None or explicit_out:
        return
    recorded = previous["ruleset"]
    if recorded.get("name") == rules.name and recorded.get("path") != str(rules.path):
        raise ScreeningError(
            f"{Path(out) / FILE_NAME} records results of rule set {recorded.get('path')}, which has the same "
            f"name {rules.name!r} as {rules.path}; nothing was written. Give one of the rule sets another "
            f"'name', or choose a results folder with --out",
            source=str(rules.path), field="name")


def command_line(args) -> str:
    """The ``screening run`` command, rebuilt from its parsed arguments (absolute paths)."""
    words = ["screening", "run", "--rules", str(Path(args.rules).resolve())]
    if getattr(args, "out", None) is not None:
        words += ["--out", str(Path(args.out).resolve())]
    words += ["--cores", str(args.cores)]
    if getattr(args, "dry_run", False):
        words.append("--dry-run")
    if getattr(args, "snakemake_args", ""):
        words.append(f"--snakemake-args={args.snakemake_args}")
    return shlex.join(words)


def prepare_run(rules, out, args) -> None:
    """Called by ``screening run`` before the workflow starts: guard the folder, pass on the command."""
    check_results_folder(rules, out, explicit_out=getattr(args, "out", None) is not None)
    # the workflow's provenance rule reads it from the environment, which Snakemake passes to its jobs
    os.environ[COMMAND_ENV] = command_line(args)
