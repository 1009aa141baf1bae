"""Trace arrays handed from worker processes to the caller through a file in memory, not a pipe.

A chunk's results carry every case's trace columns (about 200 kB a case on the full-cycle demo,
some 13 MB for 64 cases): pickled, written to the pool's pipe, read and unpickled in the calling
process, they are copied four times and cost the caller about as much CPU as a tenth of the
workers' simulation (measured on the 1000-case demo grid).  Instead a worker writes the arrays of a
chunk end to end into one file of a folder on a memory file system (``/dev/shm`` where it exists)
and returns the results with small placeholders; the caller maps the file (privately, copy on
write), makes each array a view of the mapping and deletes the file, so an array costs the caller
nothing until it is read (a sweep that keeps only the figures never reads them).  The values are
the same bytes.  Where no such folder can be made the
arrays travel in the pickled results as before.

>>> spool = TraceSpool.create()           # in the caller
>>> packed = pack(results, spool.folder)  # in a worker
>>> results = spool.unpack(packed)        # in the caller
>>> spool.remove()
"""

from __future__ import annotations

import math
import mmap
import os
import shutil
import tempfile
import uuid
from dataclasses import dataclass

import numpy as np

MIN_BYTES = 256 * 1024
"""Chunks whose trace arrays are smaller than this travel pickled (a file costs more)."""

ALIGN = 64
"""Byte alignment of each array in the file."""


@dataclass(frozen=True)
class Spooled:
    """Where one array is in its chunk's file: byte offset, dtype (``numpy.dtype.str``), shape."""

    offset: int
    dtype: str
    shape: tuple


def _memory_folder() -> str | None:
    base = "/dev/shm"
    if not (os.path.isdir(base) and os.access(base, os.W_OK | os.X_OK)):
        return None
    try:
        return tempfile.mkdtemp(prefix="cyclesim-traces-", dir=base)
    except OSError:
        return None


class TraceSpool:
    """The caller's folder for the workers' trace files (None: none could be made)."""

    def __init__(self, folder: str | None):
        self.folder = folder

    @classmethod
    def create(cls) -> "TraceSpool":
        return cls(_memory_folder())

    def unpack(self, packed) -> list:
        """The results of one chunk from what :func:`pack` returned, each spooled array copied back
        into its case's trace, the chunk's file deleted."""
        results, path = packed
        if path is None:
            return results
        try:
            with open(path, "rb") as f:
                # a private (copy-on-write) mapping: the arrays are views of it, writable, and
                # cost nothing until read; the mapping lives as long as any of them
                mm = mmap.mmap(f.fileno(), os.fstat(f.fileno()).st_size, access=mmap.ACCESS_COPY)
            for r in results:
                trace = getattr(r, "trace", None) or {}
                for k, v in trace.items():
                    if isinstance(v, Spooled):
                        trace[k] = _view(mm, v)
        finally:
            try:
                os.unlink(path)     # the mapping stays valid: the memory is freed with the last view
            except OSError:
                pass
        return results

    def remove(self) -> None:
        """Delete the folder and any file a worker left in it (one that died while writing)."""
        if self.folder is not None:
            shutil.rmtree(self.folder, ignore_errors=True)


def _view(mm, v: Spooled) -> np.ndarray:
    dt = np.dtype(v.dtype)
    n = math.prod(v.shape)
    if n == 0:
        return np.empty(v.shape, dtype=dt)
    return np.frombuffer(mm, dtype=dt, count=n, offset=v.offset).reshape(v.shape)


def _spoolable(v) -> bool:
    return isinstance(v, np.ndarray) and v.dtype.kind in "biufc" and not v.dtype.hasobject


def pack(results: list, folder: str | None) -> tuple:
    """``(results, path)``: the trace arrays of ``results`` written end to end into a new file of
    ``folder`` and replaced by :class:`Spooled` placeholders (path None: nothing written, where
    there is no folder, the arrays are small, or the file cannot be written)."""
    if folder is None:
        return results, None
    arrays = [(r, k, v) for r in results for k, v in (getattr(r, "trace", None) or {}).items() if _spoolable(v)]
    total = sum(v.nbytes for _, _, v in arrays)
    if total == 0 or total < MIN_BYTES:
        return results, None
    path = os.path.join(folder, f"{os.getpid()}-{uuid.uuid4().hex}.bin")
    places = []
    try:
        with open(path, "wb") as f:
            offset = 0
            for _, _, v in arrays:
                pad = -offset % ALIGN
                if pad:
                    f.write(b"\0" * pad)
                    offset += pad
                a = np.require(v, requirements="C")
                f.write(memoryview(a.reshape(-1)).cast("B"))
                places.append(Spooled(offset, a.dtype.str, a.shape))
                offset += a.nbytes
    except OSError:
        try:
            os.unlink(path)
        except OSError:
            pass
        return results, None
    for (r, k, _), place in zip(arrays, places):
        r.trace[k] = place
    return results, path
