"""Can this machine render with VTK? A probe that never loads VTK itself.

VTK (through pyvista) needs an OpenGL implementation: EGL for off-screen
pictures, GLX/libGL with a display for windows. Where none is installed (a bare
Debian or a slim container) VTK aborts the whole process with a segmentation
fault instead of raising an error, so the solving process must know before it
imports VTK. :func:`gl_library` looks the libraries up with
:func:`ctypes.util.find_library` (no VTK import, no subprocess).

Setting ``MESASTRAIN_NO_GL=1`` makes the probe fail, to test the fallbacks.
"""

from __future__ import annotations

import functools
import os

__all__ = ["GL_PACKAGES", "gl_library", "no_gl_note"]

#: Debian packages that provide what VTK loads.
GL_PACKAGES = "libegl1 and libgl1-mesa-dri (Debian/Ubuntu: apt-get install libegl1 libgl1-mesa-dri)"


@functools.lru_cache(maxsize=1)
def _found() -> str | None:
    from ctypes.util import find_library

    for name in ("EGL", "OSMesa", "GL"):
        lib = find_library(name)
        if lib:
            return lib
    return None


def gl_library() -> str | None:
    """The GL library VTK can load (e.g. ``libEGL.so.1``), or None."""
    if os.environ.get("MESASTRAIN_NO_GL", "").strip() not in ("", "0"):
        return None
    return _found()


def no_gl_note(what: str) -> str:
    """One line: what was skipped and which system packages enable it."""
    return f"{what} skipped: no OpenGL library (EGL/GL) on this machine; install {GL_PACKAGES}"


def quiet_vtk() -> None:
    """Keep VTK's own messages (e.g. "bad X server connection", with ANSI colours) off stderr.

    VTK prints warnings and errors through its output window and logger; a headless run
    has nothing to gain from them (a picture that cannot be drawn is reported in one
    line by the caller). Call after importing pyvista; harmless when VTK is missing.
    """
    try:
        from vtkmodules.vtkCommonCore import vtkLogger, vtkObject
    except ImportError:
        return
    vtkObject.GlobalWarningDisplayOff()
    vtkLogger.SetStderrVerbosity(vtkLogger.VERBOSITY_OFF)
