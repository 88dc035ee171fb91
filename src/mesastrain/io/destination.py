"""Where a run's result folder goes, and how it gets there without losing anything.

A result folder is claimed before the solve (:func:`claim_output`) and written at the
end (:meth:`Destination.partial`, :meth:`Destination.commit`):

- **Checks first.** ``--out`` must not be a file or a symbolic link, nor the working
  directory, the folder of an input file, or an ancestor of either. An existing folder
  is replaced only with ``overwrite`` and only when it is recognisably a previous
  result: it holds :data:`MARKER` (written into every result folder) or a
  ``summary.json`` whose ``program.name`` is ``mesastrain``. The location must be
  writable (a real probe: a folder is created and removed, so root on a read-only
  mount is caught too). All of this happens before anything is solved.
- **One run per folder.** An exclusive ``flock`` on a lock file of the target (in a
  private lock folder of the user, see :func:`_lock_path`) is held from the claim to
  the end; a second run to the same folder fails at once (it does not wait). The
  lock file is removed on release; one left by SIGKILL is harmless and reused.
- **Atomic swap.** Files are written into ``.<name>.partial-<host>-<pid>.<start>-<token>``
  beside the target (owner host, pid and process start time in the name), created
  with the user's umask. On commit it is exchanged with the old result in one
  ``renameat2(RENAME_EXCHANGE)`` where the system has it; otherwise the old result
  is moved into a second partial folder, the new one renamed into place, and the old
  one moved back if that fails. The old result is then deleted with its partial
  folder, so no ``.old`` folders are left.
- **Clean-up** of partial folders left by killed runs (under the lock) removes only
  those whose owner process, on this host, is gone.
- **Failure** (an error, Ctrl-C, SIGTERM, a full disk) removes the partial folder and
  any parent folders the claim created, and leaves an old result untouched.
"""

from __future__ import annotations

import ctypes
import errno
import glob
import hashlib
import json
import os
import re
import secrets
import shutil
import signal
import socket
import stat
import tempfile
from pathlib import Path

from mesastrain import __version__
from mesastrain.errors import CaseError

#: File written into every result folder: it marks the folder as replaceable by a
#: later ``--overwrite``.
MARKER = ".mesastrain-result"

OPTION = "--out"


class OutputError(CaseError):
    """The result location cannot be used (refused, unwritable, full, in use)."""

    def __init__(self, message: str, key: str = OPTION, source: str | None = None):
        super().__init__(key, message, source)

    def with_source(self, source: str) -> OutputError:
        return type(self)(self.message, self.key, source)


# --------------------------------------------------------------------------
# recognising results and owners
# --------------------------------------------------------------------------
def shown_path(path) -> str:
    """A path as shown in a one-line message: control characters escaped."""
    text = str(path) or "."
    return re.sub(r"[\x00-\x1f\x7f]", lambda m: repr(m.group(0))[1:-1], text)


def is_result_folder(path: Path) -> bool:
    """True when ``path`` is a folder written by mesastrain (marker or its summary.json)."""
    path = Path(path)
    if path.is_symlink() or not path.is_dir():
        return False
    if (path / MARKER).is_file():
        return True
    summary = path / "summary.json"
    try:
        if not summary.is_file() or summary.stat().st_size > 512 * 2**20:
            return False
        with open(summary, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError, RecursionError):
        return False
    program = data.get("program") if isinstance(data, dict) else None
    return isinstance(program, dict) and program.get("name") == "mesastrain"


def _host() -> str:
    return re.sub(r"[^A-Za-z0-9.]", "_", socket.gethostname() or "localhost")[:64]


def _start_time(pid: int) -> str | None:
    """Start time of a process in clock ticks since boot (Linux), to tell reused pids apart."""
    try:
        with open(f"/proc/{pid}/stat", encoding="ascii", errors="replace") as fh:
            stat = fh.read()
        return stat.rsplit(")", 1)[1].split()[19]
    except (OSError, IndexError):
        return None


def _alive(pid: int, start: str | None) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:       # exists, owned by someone else
        pass
    except OSError:
        return True
    if start and start != "0":
        now = _start_time(pid)
        if now is not None and now != start:
            return False          # the pid was reused by another process
    return True


_PARTIAL = re.compile(r"\.partial-(?P<host>[A-Za-z0-9._]+)-(?P<pid>\d+)\.(?P<start>\d+)-"
                      r"(?P<token>[0-9a-f]{8})$")


def _partial_name(name: str) -> str:
    pid = os.getpid()
    return (f".{name}.partial-{_host()}-{pid}.{_start_time(pid) or 0}-"
            f"{secrets.token_hex(4)}")


def stale_partials(parent: Path, name: str) -> list[Path]:
    """Partial folders of ``name`` in ``parent`` whose owner process on this host is gone."""
    out = []
    for p in Path(parent).glob(f".{glob.escape(name)}.partial-*"):
        m = _PARTIAL.search(p.name)
        if m is None or not p.name.startswith(f".{name}.partial-"):
            continue
        if p.is_symlink() or not p.is_dir():
            continue
        if m["host"] != _host():
            continue              # another machine's: cannot tell whether it lives
        if not _alive(int(m["pid"]), m["start"]):
            out.append(p)
    return out


# --------------------------------------------------------------------------
# checks
# --------------------------------------------------------------------------
def _inside(child: str, folder: str) -> bool:
    """True when ``child`` is ``folder`` or lies below it (both real paths)."""
    return child == folder or child.startswith(folder.rstrip(os.sep) + os.sep)


def check_output(out: Path, overwrite: bool = False, inputs=(), cwd: Path | None = None) -> None:
    """Refuse a result location that is not safe to write (OutputError naming --out).

    Parameters
    ----------
    out : Path
        The requested result folder.
    overwrite : bool
        Whether an existing previous result may be replaced.
    inputs : iterable of path
        Files the run reads (the case file, an imported mesh): their folders and
        the folders above them are never replaced.
    cwd : Path, optional
        Working directory (default: the process's).
    """
    out = Path(out)
    shown = shown_path(out)
    if os.path.islink(out):
        raise OutputError(f"{shown} is a symbolic link; name the result folder itself")
    real = os.path.realpath(out)
    protected = [(os.path.realpath(cwd if cwd is not None else os.getcwd()),
                  "the working directory")]
    for f in inputs:
        if f is not None:
            protected.append((os.path.dirname(os.path.realpath(f)), f"the folder of {f}"))
    for folder, what in protected:
        if _inside(folder, real):
            how = "is" if folder == real else "holds"
            raise OutputError(f"{shown} {how} {shown_path(what)}; a result folder must be a "
                              f"new or previous result folder of its own")
    if os.path.lexists(out):
        if not out.is_dir():
            raise OutputError(f"{shown} is a file, not a result folder; choose a folder name")
        if not overwrite:
            raise OutputError(f"{shown} already exists; pass --overwrite to replace it")
        if not is_result_folder(out):
            raise OutputError(f"{shown} exists and is not a mesastrain result (no {MARKER} "
                              f"or mesastrain summary.json); it is never replaced, choose "
                              f"another folder")


def _existing_ancestor(path: Path) -> Path:
    p = Path(os.path.abspath(path))
    while not os.path.lexists(p) and p != p.parent:
        p = p.parent
    return p


def _probe_writable(folder: Path, shown: str) -> None:
    """Create and remove a folder in ``folder``; OutputError when that is not possible."""
    if not folder.is_dir():
        raise OutputError(f"cannot create {shown}: {shown_path(folder)} is not a folder")
    probe = folder / f".mesastrain-probe-{os.getpid()}-{secrets.token_hex(4)}"
    try:
        os.mkdir(probe)
    except OSError as exc:
        raise OutputError(f"cannot write {shown}: {shown_path(folder)}: "
                          f"{exc.strerror or exc}") from None
    try:
        os.rmdir(probe)
    except OSError:
        pass


# --------------------------------------------------------------------------
# the swap
# --------------------------------------------------------------------------
_RENAME_NOREPLACE, _RENAME_EXCHANGE, _AT_FDCWD = 1, 2, -100


def _load_renameat2():
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        f = libc.renameat2
    except (OSError, AttributeError):
        return None
    f.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p, ctypes.c_uint]
    f.restype = ctypes.c_int
    return f


_renameat2 = _load_renameat2()


def _rename2(src: Path, dst: Path, flags: int) -> bool:
    """renameat2 with flags; False when the system or file system does not support it."""
    if _renameat2 is None:
        return False
    if _renameat2(_AT_FDCWD, os.fsencode(src), _AT_FDCWD, os.fsencode(dst), flags) == 0:
        return True
    e = ctypes.get_errno()
    if e in (errno.ENOSYS, errno.EINVAL, errno.EOPNOTSUPP, getattr(errno, "ENOTSUP", -1)):
        return False
    raise OSError(e, os.strerror(e), str(dst))


class _SignalsHeld:
    """Block SIGINT/SIGTERM for a few system calls that must not be split."""

    def __enter__(self):
        self.mask = None
        if hasattr(signal, "pthread_sigmask"):
            self.mask = signal.pthread_sigmask(signal.SIG_BLOCK, {signal.SIGINT, signal.SIGTERM})

    def __exit__(self, *exc):
        if self.mask is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, self.mask)
        return False


def _lock_path(parent: Path, name: str) -> Path:
    """The lock file of a result folder.

    It lives in a private folder of the user (``$XDG_RUNTIME_DIR/mesastrain-locks`` or
    ``<tmp>/mesastrain-locks-<uid>``), named by a hash of the folder's real path, so a
    run killed with SIGKILL leaves nothing beside the result. Where no such folder can
    be made safely, the lock is ``.<name>.lock`` beside the result.
    """
    key = os.path.join(os.path.realpath(parent), name)
    digest = hashlib.sha256(os.fsencode(key)).hexdigest()[:32]
    uid = os.getuid() if hasattr(os, "getuid") else None
    runtime = os.environ.get("XDG_RUNTIME_DIR")
    for d in ([Path(runtime) / "mesastrain-locks"] if runtime else []) + \
             [Path(tempfile.gettempdir()) / f"mesastrain-locks-{uid}"]:
        try:
            os.mkdir(d, 0o700)
        except FileExistsError:
            pass
        except OSError:
            continue
        try:
            st = os.lstat(d)
        except OSError:
            continue
        if stat.S_ISDIR(st.st_mode) and (uid is None or st.st_uid == uid) and \
                not st.st_mode & 0o022:
            return d / f"{digest}.lock"
    return parent / f".{name}.lock"


def _sweep_locks(folder: Path, keep: Path, limit: int = 50) -> None:
    """Remove lock files of the private lock folder that nobody holds (left by SIGKILL)."""
    import fcntl

    if not folder.name.startswith("mesastrain-locks"):
        return                    # a lock beside the result: leave its neighbours alone
    try:
        names = [n for n in os.listdir(folder) if n.endswith(".lock")][:limit]
    except OSError:
        return
    for n in names:
        p = folder / n
        if p == keep:
            continue
        try:
            fd = os.open(p, os.O_RDWR | getattr(os, "O_CLOEXEC", 0))
        except OSError:
            continue
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            if os.path.samestat(os.fstat(fd), os.stat(p)):
                os.unlink(p)      # unlink while holding, as a release does
        except OSError:
            pass
        finally:
            os.close(fd)


# --------------------------------------------------------------------------
# the claim
# --------------------------------------------------------------------------
class Destination:
    """A claimed result location: checked, locked, written through a partial folder.

    Use as a context manager (see :func:`claim_output`). ``path`` is the result folder.
    """

    def __init__(self, out, overwrite: bool = False, inputs=()):
        self.path = Path(out)
        self.overwrite = overwrite
        self.inputs = tuple(inputs)
        self.shown = shown_path(out)
        self.parent = Path(os.path.abspath(self.path)).parent
        self.name = Path(os.path.abspath(self.path)).name
        self._created: list[Path] = []
        self._lock = None
        self._lock_path = None
        self._partials: list[Path] = []
        self.committed = False

    # ---- claim ----------------------------------------------------------
    def __enter__(self) -> Destination:
        try:
            self._claim()
        except BaseException:
            self._release()
            raise
        return self

    def __exit__(self, *exc):
        self._release()
        return False

    def _claim(self) -> None:
        check_output(self.path, self.overwrite, self.inputs)
        base = _existing_ancestor(self.parent)
        _probe_writable(base, self.shown)
        missing = []
        p = self.parent
        while p != base:
            missing.append(p)
            p = p.parent
        for p in reversed(missing):
            try:
                os.mkdir(p)
            except FileExistsError:
                continue
            except OSError as exc:
                raise OutputError(f"cannot create {self.shown}: {shown_path(p)}: "
                                  f"{exc.strerror or exc}") from None
            self._created.append(p)
        self._acquire_lock()
        # under the lock: the state may have changed while we waited for nothing
        check_output(self.path, self.overwrite, self.inputs)
        for stale in stale_partials(self.parent, self.name):
            shutil.rmtree(stale, ignore_errors=True)

    def _acquire_lock(self) -> None:
        try:
            import fcntl
        except ImportError:       # not POSIX: no lock
            return
        path = _lock_path(self.parent, self.name)
        for _ in range(20):
            try:
                fd = os.open(path, os.O_RDWR | os.O_CREAT | getattr(os, "O_CLOEXEC", 0), 0o666)
            except OSError as exc:
                raise OutputError(f"cannot write {self.shown}: {shown_path(path)}: "
                                  f"{exc.strerror or exc}") from None
            try:
                fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                holder = ""
                try:
                    holder = os.read(fd, 200).decode("utf-8", "replace").strip()
                except OSError:
                    pass
                os.close(fd)
                by = f" ({holder})" if holder and "\n" not in holder else ""
                raise OutputError(f"{self.shown} is being written by another mesastrain "
                                  f"run{by}; wait for it to finish or choose another folder") \
                    from None
            # the holder before us may have removed the file after we opened it
            try:
                same = os.path.samestat(os.fstat(fd), os.stat(path))
            except OSError:
                same = False
            if not same:
                os.close(fd)
                continue
            try:
                os.ftruncate(fd, 0)
                os.write(fd, f"pid {os.getpid()} on {socket.gethostname()}".encode())
            except OSError:
                pass
            self._lock, self._lock_path = fd, path
            _sweep_locks(path.parent, keep=path)
            return
        raise OutputError(f"could not lock {self.shown}; try again")

    def _release(self) -> None:
        for p in self._partials:
            shutil.rmtree(p, ignore_errors=True)
        self._partials = []
        if self._lock is not None:
            try:
                os.unlink(self._lock_path)      # unlink while holding, then unlock
            except OSError:
                pass
            os.close(self._lock)
            self._lock = None
        if not self.committed:
            for p in reversed(self._created):
                try:
                    os.rmdir(p)                 # only if still empty
                except OSError:
                    pass
        self._created = []

    # ---- write ----------------------------------------------------------
    def partial(self) -> Path:
        """A new, empty partial folder beside the target (user's umask); removed on failure."""
        for _ in range(100):
            p = self.parent / _partial_name(self.name)
            try:
                os.mkdir(p, 0o777)
            except FileExistsError:
                continue
            except OSError as exc:
                raise OutputError(f"cannot write {self.shown}: {exc.strerror or exc}") from None
            self._partials.append(p)
            return p
        raise OutputError(f"cannot write {self.shown}: no free partial folder name")

    def commit(self, partial: Path) -> Path:
        """Put the finished ``partial`` folder in place of the target; returns ``path``."""
        partial = Path(partial)
        check_output(self.path, self.overwrite, self.inputs)
        with open(partial / MARKER, "w", encoding="utf-8") as fh:
            json.dump({"program": "mesastrain", "version": __version__,
                       "note": "result folder written by mesastrain; a later run with "
                               "--overwrite may replace this folder"}, fh)
            fh.write("\n")
        target = self.parent / self.name
        with _SignalsHeld():
            if os.path.lexists(target):
                old = self._swap(partial, target)
            else:
                if not _rename2(partial, target, _RENAME_NOREPLACE):
                    os.rename(partial, target)
                old = None
                self._partials.remove(partial)
            self.committed = True
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
            if old in self._partials:
                self._partials.remove(old)
        return self.path

    def _swap(self, partial: Path, target: Path) -> Path:
        """Exchange ``partial`` with the existing result; returns the folder now holding
        the old result (a partial folder of ours)."""
        if _rename2(partial, target, _RENAME_EXCHANGE):
            return partial        # now holds the old result
        aside = self.partial()
        os.rename(target, aside / "previous")
        try:
            os.rename(partial, target)
        except BaseException:
            try:
                os.rename(aside / "previous", target)    # restore the old result
            except OSError:
                self._partials.remove(aside)             # never delete it
                raise OutputError(f"could not replace {self.shown}; the previous result "
                                  f"is kept in {aside / 'previous'}") from None
            raise
        self._partials.remove(partial)
        return aside


def claim_output(out, overwrite: bool = False, inputs=()) -> Destination:
    """Check and lock a result location (a context manager; see :class:`Destination`).

    Raises
    ------
    OutputError
        The location is refused, unwritable or in use; the message names ``--out``.
    """
    return Destination(out, overwrite, inputs)


def write_failure(exc: OSError, shown: str) -> OutputError:
    """One-line OutputError for an OSError raised while writing the result."""
    what = exc.strerror or str(exc) or type(exc).__name__
    where = (f" ({shown_path(Path(exc.filename).name)})" if getattr(exc, "filename", None)
             else "")
    return OutputError(f"could not write {shown}: {what}{where}; nothing was written")
