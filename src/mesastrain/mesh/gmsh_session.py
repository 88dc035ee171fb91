"""A silent, signal-safe gmsh session (:class:`_Gmsh`): the one place gmsh is started.

Used by the gmsh shapes (:mod:`mesastrain.mesh.shapes`); see :class:`_Gmsh` for how the
process's SIGINT/SIGTERM handlers are kept.
"""

from __future__ import annotations

import ctypes
import os
import signal
import threading

__all__ = ["_Gmsh"]


#: gmsh options the mesh kinds set (restored afterwards when gmsh was already running).
_OPTIONS = ("General.Terminal", "General.Verbosity", "Mesh.MeshSizeFromPoints",
            "Mesh.MeshSizeFromCurvature", "Mesh.MeshSizeExtendFromBoundary", "Mesh.MeshSizeMax",
            "Mesh.MeshSizeMin", "Mesh.ElementOrder", "Mesh.Optimize", "Mesh.Algorithm3D",
            "General.NumThreads")


#: gmsh keeps one global state: one session at a time in the process (derived-quantity
#: providers run on threads, and a coarse solve may mesh with gmsh); re-entrant, so a
#: session inside a session of the same thread still works.
_LOCK = threading.RLock()

_STOP_SIGNALS = tuple(getattr(signal, n) for n in ("SIGINT", "SIGTERM") if hasattr(signal, n))


class _SignalState:
    """The process's SIGINT/SIGTERM dispositions, saved so gmsh cannot keep them.

    ``gmsh.initialize()`` resets SIGTERM (and, unless ``interruptible=False``,
    SIGINT) to the default action at the C level, behind Python's back, so a later
    SIGTERM would kill the run without clean-up. The C-level actions are saved as
    opaque ``struct sigaction`` buffers (any thread may restore them); the Python
    handlers are saved too, in the main thread.
    """

    def __init__(self):
        self.python = {}
        self.native = {}
        if threading.current_thread() is threading.main_thread():
            self.python = {s: signal.getsignal(s) for s in _STOP_SIGNALS}
        libc = _libc()
        if libc is not None:
            for s in _STOP_SIGNALS:
                buf = ctypes.create_string_buffer(512)     # larger than any struct sigaction
                if libc.sigaction(int(s), None, buf) == 0:
                    self.native[s] = buf

    def restore(self) -> None:
        for s, h in self.python.items():
            if h is not None:
                signal.signal(s, h)
        libc = _libc()
        for s, buf in self.native.items():
            libc.sigaction(int(s), buf, None)


class _Blocked:
    """SIGINT and SIGTERM blocked in this thread while gmsh changes their actions: one
    arriving then waits and goes to the restored handler, not to gmsh's default."""

    def __enter__(self):
        self.mask = None
        if hasattr(signal, "pthread_sigmask"):
            self.mask = signal.pthread_sigmask(signal.SIG_BLOCK, set(_STOP_SIGNALS))

    def __exit__(self, *exc):
        if self.mask is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, self.mask)
        return False


def _libc():
    try:
        return ctypes.CDLL(None, use_errno=True) if os.name == "posix" else None
    except OSError:
        return None


class _Gmsh:
    """Context manager: a silent gmsh session with an empty model of its own.

    When the caller already runs gmsh, its session, current model and the
    options touched here are left as they were; otherwise gmsh is started and
    finalised around the block.

    Signals: gmsh is initialised without its own SIGINT handling
    (``interruptible=False``) and the process's SIGINT/SIGTERM handlers are put
    back after ``initialize`` and ``finalize``. Inside the block (main thread) a
    SIGINT or SIGTERM is held back and delivered to the caller's handler when the
    block ends, because a handler that raises inside gmsh's mesh-size callback
    would only be printed and ignored by ctypes. So Ctrl-C while gmsh meshes takes
    effect when the current gmsh call returns.
    """

    def __enter__(self):
        import gmsh

        _LOCK.acquire()
        try:
            return self._enter(gmsh)
        except BaseException:
            _LOCK.release()
            raise

    def _enter(self, gmsh):
        self.gmsh = gmsh
        self.signals = _SignalState()
        self.pending = []
        for s in self.signals.python:
            if callable(self.signals.python[s]):
                signal.signal(s, self._hold)
        try:
            self._start(gmsh)
        except BaseException:
            self._end_signals()
            raise
        return gmsh

    def _hold(self, signum, frame):
        self.pending.append(signum)

    def _start(self, gmsh):
        self.owner = not gmsh.isInitialized()
        if self.owner:
            with _Blocked():
                held = _SignalState()
                try:
                    gmsh.initialize(readConfigFiles=False, interruptible=False)
                except TypeError:      # a gmsh API without the keyword
                    gmsh.initialize(readConfigFiles=False)
                finally:
                    held.restore()
            self.saved, self.previous = {}, None
        else:
            self.saved = {k: gmsh.option.getNumber(k) for k in _OPTIONS}
            try:
                self.previous = gmsh.model.getCurrent()
            except Exception:    # no current model
                self.previous = None
        gmsh.option.setNumber("General.Terminal", 0)
        gmsh.option.setNumber("General.Verbosity", 1)
        gmsh.model.add(f"mesastrain-{id(self)}")

    def _end_signals(self):
        self.signals.restore()
        if self.pending:
            signal.raise_signal(self.pending[0])   # now to the caller's handler

    def __exit__(self, *exc):
        gmsh = self.gmsh
        try:
            if self.owner:
                with _Blocked():
                    held = _SignalState()
                    try:
                        gmsh.finalize()
                    finally:
                        held.restore()
                return False
            gmsh.model.remove()
            for k, v in self.saved.items():
                gmsh.option.setNumber(k, v)
            if self.previous:
                gmsh.model.setCurrent(self.previous)
            return False
        finally:
            try:
                self._end_signals()
            finally:
                _LOCK.release()
