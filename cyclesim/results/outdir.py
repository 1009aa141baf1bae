"""The output folder of a command: one writer at a time, checked writable before any work.

>>> from cyclesim.results.outdir import folder_lock
>>> with folder_lock("results"):         # refused (CyclesimError) while another process holds it
...     ...                              # write into results/

A run takes an exclusive lock on its ``--out`` folder for its whole length: the
file :data:`LOCK_NAME` in the folder holds the process id, host and start time
of the holder, and an advisory ``flock`` on it is what excludes a second
writer.  The operating system drops that lock when the holder ends in any way
(SIGKILL included), so a lock file left by a process that has died is simply
taken over; one held by a live process refuses the second run with one line
naming that process.  Without ``fcntl`` (not on Linux or macOS) the file is
created exclusively instead and a holder is judged dead when no process of its
id exists.

The lock is re-entrant within a process (a study that runs a sweep into the
same folder takes it twice); child processes forked while it is held do not
keep it.  Taking it also proves the folder writable: the folder is made if
missing (and removed again at release if the run left it empty) and a probe
file is created and removed in it, so a read-only, immutable or impossible
folder is refused before anything is simulated.
"""

from __future__ import annotations

import contextlib
import os
import socket
import tempfile
import time
from pathlib import Path
from typing import Iterator

from ..errors import CyclesimError

try:
    import fcntl
except ImportError:  # pragma: no cover - not on POSIX
    fcntl = None  # type: ignore[assignment]

__all__ = ["LOCK_NAME", "folder_lock", "optional_lock", "folder_entries", "made_by_lock", "check_writable",
           "holder_text"]

LOCK_NAME = ".cyclesim.lock"
"""Name of the lock file inside a locked output folder."""


class _Held:
    def __init__(self, fd: int, path: Path, created: bool):
        self.fd, self.path, self.created = fd, path, created
        self.count = 1
        self.pid = os.getpid()


_held: dict[str, _Held] = {}


def _forget_in_child() -> None:
    """A forked child does not hold its parent's locks (nor release them)."""
    for h in _held.values():
        try:
            os.close(h.fd)
        except OSError:
            pass
    _held.clear()


if hasattr(os, "register_at_fork"):
    os.register_at_fork(after_in_child=_forget_in_child)


def _key(out: Path) -> str:
    return str(Path(os.path.abspath(out)).resolve())


def folder_entries(out: Path) -> list[Path]:
    """What a folder holds apart from a lock file (for the 'folder is not empty' checks)."""
    return [p for p in Path(out).iterdir() if p.name != LOCK_NAME]


def made_by_lock(out: Path) -> bool:
    """Whether the lock this process holds on ``out`` created the folder (it did not exist before)."""
    h = _held.get(_key(Path(out)))
    return bool(h is not None and h.created)


def _reason(exc: OSError) -> str:
    return exc.strerror or type(exc).__name__


def check_writable(out: Path) -> None:
    """Create and remove a probe file in the folder ``out``; one-line CyclesimError if that fails."""
    try:
        fd, tmp = tempfile.mkstemp(prefix=".cyclesim-probe.", dir=out)
        os.close(fd)
        os.unlink(tmp)
    except OSError as exc:
        raise CyclesimError(f"--out {out}: cannot write there ({_reason(exc)})") from None


def holder_text(text: str) -> str:
    """'process 123 on host, since 2026-01-01 10:00:00 UTC' from a lock file's text."""
    fields = dict(line.split("=", 1) for line in text.splitlines() if "=" in line)

    def field(name: str, default: str = "") -> str:       # printable characters only: the file may be anyone's
        return "".join(ch for ch in fields.get(name, default) if ch.isprintable()).strip()

    pid, host, since = field("pid", "?"), field("host"), field("since")
    where = f" on {host}" if host and host != socket.gethostname() else ""
    return f"process {pid[:12]}{where}" + (f", since {since[:32]}" if since else "")


def _lock_text() -> str:
    since = time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime())
    return f"pid={os.getpid()}\nhost={socket.gethostname()}\nsince={since}\n"


def _read(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8", errors="replace")[:400]
    except OSError:
        return ""


def _busy(out: Path, text: str) -> CyclesimError:
    return CyclesimError(
        f"--out {out}: in use by another cyclesim run ({holder_text(text)}); wait until it ends"
        " or choose another folder"
    )


def _acquire_flock(out: Path, path: Path) -> int:
    for _ in range(20):
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        except OSError as exc:
            raise CyclesimError(f"--out {out}: cannot write there ({_reason(exc)})") from None
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            text = _read(path)
            os.close(fd)
            raise _busy(out, text) from None
        try:
            same = os.path.samestat(os.fstat(fd), os.stat(path))
        except FileNotFoundError:
            same = False
        if not same:   # the holder removed the file as we opened it: take the new one
            os.close(fd)
            continue
        try:
            os.ftruncate(fd, 0)
            os.write(fd, _lock_text().encode("utf-8"))
        except OSError as exc:
            os.close(fd)
            raise CyclesimError(f"--out {out}: cannot write there ({_reason(exc)})") from None
        return fd
    raise CyclesimError(f"--out {out}: could not take the folder's lock ({path}); try again")  # pragma: no cover


def _pid_alive(pid: int) -> bool:  # pragma: no cover - used only without fcntl
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:
        return True
    return True


def _acquire_exclusive(out: Path, path: Path) -> int:  # pragma: no cover - used only without fcntl
    for _ in range(20):
        try:
            fd = os.open(path, os.O_RDWR | os.O_CREAT | os.O_EXCL, 0o644)
        except FileExistsError:
            text = _read(path)
            fields = dict(line.split("=", 1) for line in text.splitlines() if "=" in line)
            try:
                pid = int(fields.get("pid", ""))
            except ValueError:
                pid = -1
            if pid > 0 and pid != os.getpid() and _pid_alive(pid):
                raise _busy(out, text) from None
            with contextlib.suppress(FileNotFoundError):
                os.unlink(path)
            continue
        except OSError as exc:
            raise CyclesimError(f"--out {out}: cannot write there ({_reason(exc)})") from None
        os.write(fd, _lock_text().encode("utf-8"))
        return fd
    raise CyclesimError(f"--out {out}: could not take the folder's lock ({path}); try again")


def _make_folder(out: Path) -> bool:
    """Make ``out`` if missing; True if this call made it."""
    if out.exists() or out.is_symlink():
        if not out.is_dir():
            raise CyclesimError(f"--out {out}: exists and is not a folder")
        return False
    try:
        out.mkdir(parents=True)
    except FileExistsError:
        if not out.is_dir():
            raise CyclesimError(f"--out {out}: exists and is not a folder") from None
        return False
    except OSError as exc:
        raise CyclesimError(f"--out {out}: cannot create the folder ({_reason(exc)})") from None
    return True


@contextlib.contextmanager
def folder_lock(out: str | Path) -> Iterator[Path]:
    """Hold the exclusive lock of the output folder ``out`` for the ``with`` block.

    Makes the folder if missing and proves it writable first.  Raises
    :class:`CyclesimError` (one line) if it cannot be made or written, or while
    another live process holds its lock.  Yields the folder.
    """
    out = Path(out)
    key = _key(out)
    h = _held.get(key)
    if h is not None and h.pid == os.getpid():
        h.count += 1
        try:
            yield out
        finally:
            h.count -= 1
        return
    created = _make_folder(out)
    path = out / LOCK_NAME
    try:
        fd = _acquire_flock(out, path) if fcntl is not None else _acquire_exclusive(out, path)
        try:
            check_writable(out)
        except CyclesimError:
            _release(_Held(fd, path, created))
            raise
    except CyclesimError:
        if created:
            with contextlib.suppress(OSError):
                out.rmdir()
        raise
    h = _Held(fd, path, created)
    _held[key] = h
    try:
        yield out
    finally:
        h.count -= 1
        if h.count <= 0 and _held.get(key) is h:
            del _held[key]
            _release(h)


def optional_lock(out: str | Path | None):
    """:func:`folder_lock` of ``out``, or nothing when there is no output folder."""
    return folder_lock(out) if out is not None else contextlib.nullcontext()


def _release(h: _Held) -> None:
    if h.pid != os.getpid():    # pragma: no cover - a forked child never releases
        return
    with contextlib.suppress(OSError):
        os.unlink(h.path)       # removed while still held, so no one takes a file about to vanish
    with contextlib.suppress(OSError):
        os.close(h.fd)
    if h.created:
        with contextlib.suppress(OSError):
            if not any(h.path.parent.iterdir()):
                h.path.parent.rmdir()
