"""Snakemake's command line, run so that the process ends as soon as the workflow has.

``python -m screening.snakemake_main <snakemake arguments>`` is ``python -m snakemake``, except that
the process can be started before its arguments are known, and ends sooner.

Started early
    ``screening run`` starts this module with the single argument ``--wait-for-arguments`` before it
    checks the rule set, host library and pool.  Importing Snakemake (and the parts of this package
    that the Snakefile imports) takes about 2 s; done in parallel with the 1 s of input checks, on the
    second core, it no longer adds to the run.  The process then waits on its standard input for one
    line of JSON, ``{"argv": [...], "environ": {...}}``: Snakemake's arguments and the environment to
    run them in (``screening run`` sets the command line for the provenance record only after the
    process has started).  An empty standard input -- the input checks failed -- ends it without
    doing anything, and the caller may equally kill it: until the line arrives it has touched no file.

Ends sooner
    Two things differ after Snakemake's ``main`` has returned:

* Snakemake's scheduler starts a non-daemon ``threading.Timer`` at each scheduling pass (the
  re-evaluation of its job rate limiter, one ``--max-jobs-per-timespan`` timespan, 1 s by default),
  and the last of them keeps the interpreter alive for up to that long.  Such a timer only wakes a
  scheduler that has returned, so every pending timer is cancelled.
* The interpreter's own teardown (freeing every module and frame that the stages, run as threads of
  this process, left behind) took about 0.6 s on a 2-core machine.  The exit handlers are run and the
  standard streams flushed -- which is all that teardown does for the outside world -- and the
  process then ends with ``os._exit``.

Both were measured on a rerun after a change of ranking weights, where they were a sixth of the
time (benchmarks/run.py, README "Speed and scale").  Snakemake's exit status is passed on unchanged.
"""
from __future__ import annotations

import atexit
import json
import os
import sys
import threading


def cancel_pending_timers() -> int:
    """Cancel every ``threading.Timer`` still waiting; returns how many there were."""
    timers = [t for t in threading.enumerate() if isinstance(t, threading.Timer) and t.is_alive()]
    for timer in timers:
        timer.cancel()
    return len(timers)


def exit_status(code) -> int:
    """The process status ``sys.exit(code)`` would give (a message prints and gives 1)."""
    if code is None:
        return 0
    if isinstance(code, int):
        return code
    print(code, file=sys.stderr)
    return 1


def run(argv: list[str] | None = None) -> int:
    """Snakemake's ``main`` with ``argv``; its exit status."""
    from snakemake.cli import main as snakemake_cli

    try:
        snakemake_cli(argv)
        code = 0
    except SystemExit as exc:
        code = exc.code
    finally:
        cancel_pending_timers()
    return exit_status(code)


WAIT_FLAG = "--wait-for-arguments"


def wait_for_arguments() -> list[str] | None:
    """Import what a run needs, then read the JSON line of arguments; None when stdin is empty."""
    import snakemake.cli  # noqa: F401  (the import this early start exists for)

    import screening.pipeline  # noqa: F401  (what the Snakefile imports)
    import screening.report  # noqa: F401

    line = sys.stdin.readline()
    if not line.strip():
        return None
    message = json.loads(line)
    os.environ.update(message["environ"])
    return list(message["argv"])


def main() -> None:
    argv = sys.argv[1:]
    if argv == [WAIT_FLAG]:
        argv = wait_for_arguments()
        if argv is None:
            os._exit(0)
        sys.argv[1:] = argv  # as if started with them (the Snakefile reads sys.argv)
    status = run(argv)
    atexit._run_exitfuncs()  # logging.shutdown among them: every log handler flushed and closed
    sys.stdout.flush()
    sys.stderr.flush()
    os._exit(status)


if __name__ == "__main__":
    main()
