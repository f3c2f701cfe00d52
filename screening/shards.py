"""How a host library is cut into shards (pure arithmetic, no imports: the CLI uses it before its run).

A shard is a run of hosts that the per-shard stages (``screen_shard``, ``edge_shard``) take as one job.
On one machine few, large shards are fastest, because Snakemake's own cost per job grows with the
number of jobs: 1,000 hosts on 2 cores took 93-114 s in 40 shards of 25 hosts and 40-68 s in 8 shards
of 125 (measured with benchmarks/run.py; README, "Speed and scale").  On a cluster the shard size is the
unit of a cluster job and is the user's choice.
"""
from __future__ import annotations

LOCAL_SHARDS_PER_CORE = 4
"""About this many shards a core run fastest locally (the measurement above)."""
MIN_LOCAL_SHARD = 7
"""Smallest local shard worth a job: below it the per-job cost outweighs the work (the default rule set's
25 hosts in 4 shards of 7)."""


def shard_count(n_hosts: int, shard_size: int) -> int:
    return max(1, -(-n_hosts // shard_size))


def local_shard_size(n_hosts: int, cores: int) -> int:
    """Shard size for a run on one machine: about LOCAL_SHARDS_PER_CORE shards a core."""
    return max(MIN_LOCAL_SHARD, -(-n_hosts // (LOCAL_SHARDS_PER_CORE * cores)))
