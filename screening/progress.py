"""Terminal progress of a screen: stages done and candidates processed, for long runs only.

Two honest sources, both written by the run itself:

* Snakemake's own job accounting on its output stream -- the ``Job stats``
  table at the start (jobs per rule), ``Finished jobid: N (Rule: R)`` and
  ``K of M steps (P%) done`` after each job;
* the stage logs under ``<out>/logs/`` that :func:`screening.pipeline.stage_log`
  writes: ``screen_shard`` logs the candidates it enumerated and kept, ``rank``
  the candidates it ranked.  Only logs written since the run started count.

The run stays quiet for its first ``SCREENING_PROGRESS_AFTER`` seconds
(default 15): a short screen prints nothing but its last line.  After that a
status line is shown -- rewritten in place on a terminal, one line per change
otherwise.  Snakemake's output is kept and printed in full if the run fails,
so no error message is lost; ``SCREENING_PROGRESS=never`` or ``always``
overrides the delay.
"""
from __future__ import annotations

import json
import os
import re
import subprocess
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path

from screening.errors import ScreeningError

DEFAULT_AFTER_S = 15.0
POLL_S = 0.5

_STEPS = re.compile(r"^(\d+) of (\d+) steps \(\d+%\) done")
_FINISHED = re.compile(r"Finished jobid: (\d+) \(Rule: (\w+)\)")
_STAT = re.compile(r"^(\w+)\s+(\d+)$")
_SHARD = re.compile(r"shard (\d+): (\d+) hosts, (\d+) candidates enumerated, (\d+) kept")
_RANKED = re.compile(r"ranked (\d+) candidates")


@dataclass
class State:
    done: int = 0
    total: int | None = None
    planned: dict = field(default_factory=dict)
    finished: dict = field(default_factory=dict)
    lines: list = field(default_factory=list)
    in_stats: bool = False

    def feed(self, line: str) -> None:
        self.lines.append(line)
        text = line.strip()
        if text.startswith("Job stats:"):
            self.in_stats = True
            return
        if self.in_stats:
            m = _STAT.match(text)
            if m and m[1] != "total":
                self.planned[m[1]] = int(m[2])
            elif m or (text and not text.startswith(("job", "-"))):
                self.in_stats = False
            return
        m = _STEPS.match(text)
        if m:
            self.done, self.total = int(m[1]), int(m[2])
            return
        m = _FINISHED.search(text)
        if m and m[2]:
            self.finished[m[2]] = self.finished.get(m[2], 0) + 1


def candidates_processed(logs: Path, since: float) -> dict:
    """Candidates enumerated / kept by the shards, and ranked, from stage logs written since ``since``."""
    per_shard = {}
    ranked = None
    if not logs.is_dir():
        return {"shards": 0, "enumerated": 0, "kept": 0, "ranked": None}
    for path in logs.glob("screen_shard_*.log"):
        try:
            if path.stat().st_mtime < since:
                continue
            text = path.read_text(encoding="utf-8", errors="replace")
        except OSError:  # a log being rewritten by a restarted job: count it next poll
            continue
        # Count each shard once, by its number: a rerun of a shard rewrites its log, and counting
        # lines rather than shards would count it twice.
        for m in _SHARD.finditer(text):
            per_shard[int(m[1])] = (int(m[3]), int(m[4]))
    shards = len(per_shard)
    enumerated = sum(e for e, _ in per_shard.values())
    kept = sum(k for _, k in per_shard.values())
    rank_log = logs / "rank.log"
    try:
        if rank_log.is_file() and rank_log.stat().st_mtime >= since:
            m = _RANKED.search(rank_log.read_text(encoding="utf-8", errors="replace"))
            ranked = int(m[1]) if m else None
    except OSError:  # the rank log being rewritten: the status line shows no ranked count this poll
        pass
    return {"shards": shards, "enumerated": enumerated, "kept": kept, "ranked": ranked}


def status_line(state: State, counts: dict, elapsed: float) -> str:
    if state.total:
        parts = [f"{state.done}/{state.total} steps done"]
    else:
        parts = ["planning"]
    stages = [f"{rule} {state.finished.get(rule, 0)}/{n}" for rule, n in state.planned.items()
              if rule != "all" and n > 1]
    if stages:
        parts[0] += " (" + ", ".join(stages) + ")"
    if counts["shards"]:
        parts.append(f"{counts['enumerated']:,} candidates enumerated, {counts['kept']:,} kept")
    if counts["ranked"] is not None:
        parts.append(f"{counts['ranked']:,} ranked")
    minutes, seconds = divmod(int(elapsed), 60)
    parts.append(f"{minutes}:{seconds:02d}")
    return "screening: " + " · ".join(parts)


def delay_from_env() -> float | None:
    """Seconds of silence before progress shows; None for never."""
    mode = os.environ.get("SCREENING_PROGRESS", "auto").strip().lower()
    if mode == "never":
        return None
    if mode == "always":
        return 0.0
    if mode != "auto":
        raise ScreeningError(f"must be auto, always or never, got {mode!r}", field="SCREENING_PROGRESS")
    raw = os.environ.get("SCREENING_PROGRESS_AFTER")
    if raw is None:
        return DEFAULT_AFTER_S
    try:
        value = float(raw)
    except ValueError:
        value = -1.0
    if not 0 <= value <= 86400:
        raise ScreeningError(f"must be seconds from 0 to 86400, got {raw!r}", field="SCREENING_PROGRESS_AFTER")
    return value


class EarlyWorkflow:
    """A Snakemake process started before its arguments are known (see :mod:`screening.snakemake_main`).

    ``screening run`` starts it first, so that Snakemake's import overlaps the input checks; then
    either :meth:`release` gives it the arguments (and :func:`run_workflow` follows it), or
    :meth:`discard` ends it, having run nothing.
    """

    def __init__(self):
        from screening import snakemake_main

        self.process = subprocess.Popen(
            [sys.executable, "-m", "screening.snakemake_main", snakemake_main.WAIT_FLAG],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
            encoding="utf-8", errors="replace", bufsize=1)

    def release(self, argv: list[str]) -> subprocess.Popen:
        """Hand over Snakemake's arguments and this process's environment as it is now."""
        message = json.dumps({"argv": list(argv), "environ": dict(os.environ)})
        try:
            self.process.stdin.write(message + "\n")
            self.process.stdin.close()
        except (BrokenPipeError, OSError):
            # it ended on its own while the input was checked: a broken install, say; show why
            code = self.process.wait()
            said = self.process.stdout.read().strip()
            raise ScreeningError(f"the Snakemake process ended (exit {code}) before it was given its arguments"
                                 + (f": {said[-800:]}" if said else "")) from None
        return self.process

    def discard(self) -> None:
        """End the process: it is still waiting for its arguments, so it has done nothing."""
        self.process.kill()
        self.process.wait()
        for pipe in (self.process.stdin, self.process.stdout):
            if pipe is not None:
                pipe.close()


def run_workflow(command: list[str], out: Path, *, after_s: float | None = DEFAULT_AFTER_S,
                 stream=None, echo: bool = False, early: EarlyWorkflow | None = None) -> int:
    """Run the Snakemake command; show progress once it has run ``after_s`` seconds.

    ``command`` is a full command line, or, with ``early``, the arguments handed to that already
    started Snakemake process.  Returns Snakemake's exit status.  Its output is printed to
    ``stream`` in full when it fails or when ``echo`` is set (a dry run's plan).
    """
    stream = stream if stream is not None else sys.stderr
    start = time.time()
    logs = Path(out) / "logs"
    state = State()
    if early is not None:
        process = early.release(command)
    else:
        process = subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True,
                                   encoding="utf-8", errors="replace", bufsize=1)

    def read():
        for line in process.stdout:
            state.feed(line)

    reader = threading.Thread(target=read, daemon=True)
    reader.start()
    tty = hasattr(stream, "isatty") and stream.isatty()
    shown, last = False, ""
    try:
        while True:
            try:
                process.wait(timeout=POLL_S)  # returns at once when the workflow ends
                break
            except subprocess.TimeoutExpired:
                pass
            elapsed = time.time() - start
            if after_s is None or elapsed < after_s:
                continue
            line = status_line(state, candidates_processed(logs, start), elapsed)
            # on a terminal the clock ticks in place; in a log file only a real change earns a line
            key = line.rsplit(" · ", 1)[0]
            if tty:
                stream.write("\r\033[K" + line)
                stream.flush()
            elif key != last:
                stream.write(line + "\n")
                stream.flush()
            shown, last = True, key
    except KeyboardInterrupt:
        process.terminate()
        process.wait()
        raise
    reader.join(timeout=5)
    code = process.wait()
    if shown:
        final = status_line(state, candidates_processed(logs, start), time.time() - start)
        stream.write(("\r\033[K" if tty else "") + final + "\n")
    if code != 0 or echo:
        stream.write("".join(state.lines))
    stream.flush()
    return code
