"""Issue 8, bad input: the benchmark refuses, up front and from its own estimate, a scaling size that
the machine's memory cannot hold (MemAvailable of /proc/meminfo, the Linux kernel's estimate of
memory available without swapping; see the kernel's Documentation/filesystems/proc.rst)."""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.skipif(not Path("/proc/meminfo").exists(), reason="needs /proc/meminfo (Linux)")


def test_too_many_hosts_are_refused_before_any_part_runs():
    # a billion hosts at the benchmark's 1 MB a host is a petabyte: no machine here has that
    result = subprocess.run([sys.executable, str(REPO / "benchmarks" / "run.py"), "--only", "ratio",
                             "--only", "scaling", "--sizes", "10,1000000000"],
                            capture_output=True, text=True, timeout=120)
    assert result.returncode != 0
    assert "1000000000 hosts would need about" in result.stderr
    assert "Not started" in result.stderr
    # refused before the ratio part (which comes first and takes minutes) and before the 10-host run
    assert "ratio:" not in result.stdout
    assert "scaling:" not in result.stdout
