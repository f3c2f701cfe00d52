"""Atomic file writes, shared by the stages, the caches and the report.

A file is written under a temporary name in its target folder and renamed
into place with ``os.replace`` (atomic on POSIX file systems), so a reader
sees the old file or the whole new one, never part of one.  The temporary
name carries the process and the thread: local runs execute stages as
threads of one process, and two of them may fill the same cache at once.
"""
from __future__ import annotations

import os
import threading
from pathlib import Path


def atomic_write(path, write) -> None:
    """Call ``write(temporary_path)``, then move the result to ``path``."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.tmp{os.getpid()}-{threading.get_ident()}")
    try:
        write(tmp)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)
