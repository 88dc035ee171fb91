"""gmsh must not take SIGINT/SIGTERM away from the run (issue: signals after a gmsh shape)."""

import os
import signal
import threading

import pytest

from mesastrain.mesh.shapes import _Gmsh

pytestmark = pytest.mark.skipif(threading.current_thread() is not threading.main_thread(),
                                reason="signal handlers live in the main thread")


class Stop(Exception):
    pass


@pytest.fixture
def handlers():
    """SIGINT and SIGTERM raise Stop (as the command line's handlers raise KeyboardInterrupt)."""
    def stop(signum, frame):
        raise Stop(signum)

    old = {s: signal.signal(s, stop) for s in (signal.SIGINT, signal.SIGTERM)}
    yield stop
    for s, h in old.items():
        signal.signal(s, h)


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT])
def test_handlers_still_work_after_a_gmsh_session(handlers, sig):
    with _Gmsh() as gmsh:
        gmsh.model.occ.addBox(0, 0, 0, 1, 1, 1)
        gmsh.model.occ.synchronize()
        gmsh.model.mesh.generate(3)
    assert signal.getsignal(sig) is handlers
    with pytest.raises(Stop):
        os.kill(os.getpid(), sig)          # delivered to our handler, not the default action
        for _ in range(1000):
            pass


@pytest.mark.parametrize("sig", [signal.SIGTERM, signal.SIGINT])
def test_signal_inside_gmsh_is_delivered_when_the_block_ends(handlers, sig):
    calls = []

    def size(dim, tag, x, y, z, lc):
        if not calls:
            os.kill(os.getpid(), sig)      # arrives inside gmsh's ctypes callback
        calls.append(1)
        return 0.5

    reached_end = False
    with pytest.raises(Stop):
        with _Gmsh() as gmsh:
            gmsh.model.occ.addBox(0, 0, 0, 1, 1, 1)
            gmsh.model.occ.synchronize()
            gmsh.model.mesh.setSizeCallback(size)
            gmsh.model.mesh.generate(3)
            reached_end = True              # the mesh completed: the signal was held
    assert reached_end and len(calls) > 1
    assert signal.getsignal(sig) is handlers
