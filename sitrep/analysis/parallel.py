"""Two independent computations on two cores, with the result of running them one after the other.

:func:`side_by_side` runs ``there`` in a forked child process while this
process runs ``here``; the child's result comes back pickled through a pipe.
A fork copies the parent's memory (the neighbour graph, the values, the
imported libraries), so nothing is re-imported or re-built and the child
starts in milliseconds; a pool of ``spawn`` processes would spend longer
importing than the work takes. Each computation is given its own seed by the
caller, so the results are the same as sequential ones, bit for bit.

Whenever the child cannot deliver (it failed, was killed, or its result does
not unpickle) ``there`` simply runs again here, so the worst case is the
sequential time and a failure is raised from this process with its own
traceback. Forking is skipped (both run here, one after the other) where it
is not available or not safe: no ``os.fork`` (Windows), fewer than two usable
cores, a Python thread running that the child might need (any other than
sitrep's own progress ticker, which only redraws a bar the child never
touches), or ``SITREP_PARALLEL=0`` in the environment.
"""

from __future__ import annotations

import os
import pickle
import signal
import threading
import warnings
from collections.abc import Callable
from typing import TypeVar

__all__ = ["can_fork", "side_by_side", "usable_cores"]

T = TypeVar("T")
U = TypeVar("U")

_SWITCH = "SITREP_PARALLEL"
"""Environment variable: "0" runs everything in this process."""

FORK_TOLERANT_THREADS = frozenset({"sitrep-progress"})
"""Names of sitrep's own threads that may be running at a fork: they hold no lock the child
uses (the progress ticker takes only its own lock to redraw the bar on the terminal)."""


def usable_cores() -> int:
    """Cores this process may run on (its CPU affinity where the system tells it)."""
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0))
    return os.cpu_count() or 1  # pragma: no cover - platforms without affinity


def can_fork() -> bool:
    """True when :func:`side_by_side` would run its two computations in two processes."""
    return (
        hasattr(os, "fork")
        and os.environ.get(_SWITCH, "1") != "0"
        and usable_cores() >= 2
        and _only_tolerant_threads()
    )


def _only_tolerant_threads() -> bool:
    """True when this is the main thread and every other live thread is one of sitrep's own."""
    main = threading.main_thread()
    return threading.current_thread() is main and all(
        t is main or t.name in FORK_TOLERANT_THREADS for t in threading.enumerate()
    )


def side_by_side(
    here: Callable[[], T], there: Callable[[], U], *, fork: bool = True
) -> tuple[T, U]:
    """Return ``(here(), there())``, computed at the same time when the machine allows.

    Parameters
    ----------
    here, there : callable
        Independent computations without side effects that matter to the
        caller (``there`` runs in a copy of this process: what it changes
        there is lost). ``there``'s result must pickle.
    fork : bool, default True
        False runs both here, one after the other.

    Raises
    ------
    Exception
        Whatever ``here`` or ``there`` raises, from this process: when
        ``here`` raises, the child is stopped; when the child fails,
        ``there`` is run here and raises here.
    """
    if not (fork and can_fork()):
        return here(), there()
    read_end, write_end = os.pipe()
    pid = _fork()
    if pid == 0:  # pragma: no cover - the child; coverage does not follow it
        _child(there, read_end, write_end)
    os.close(write_end)
    try:
        first = here()
    except BaseException:
        _stop(pid, read_end)
        raise
    return first, _collect(pid, read_end, there)


def _fork() -> int:
    """``os.fork()``, with Python's warning about threads of other libraries silenced.

    Python 3.12+ warns when the process has more than one OS thread. The
    extra threads here are, besides the progress ticker that :func:`can_fork`
    admits, not Python's: they are the BLAS thread pools of numpy and scipy
    and pyarrow's allocator thread, which all install fork handlers and are
    not used by the child's permutation loop in a way that needs them.
    """
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=r".*fork\(\) may lead to deadlocks.*")
        warnings.filterwarnings(
            "ignore", category=DeprecationWarning, message=r".*multi-threaded.*"
        )
        return os.fork()


def _child(there: Callable[[], object], read_end: int, write_end: int) -> None:  # pragma: no cover
    """Run ``there`` and write its pickled result; never return into the caller's code."""
    status = 1
    try:
        os.close(read_end)
        payload = pickle.dumps(there(), protocol=pickle.HIGHEST_PROTOCOL)
        with os.fdopen(write_end, "wb") as out:
            out.write(payload)
        status = 0
    except BaseException:  # noqa: BLE001 - the parent re-runs ``there`` and raises there
        status = 1
    finally:
        os._exit(status)


def _stop(pid: int, read_end: int) -> None:
    """Kill the child and reap it (``here`` failed: its sibling's result is not wanted)."""
    try:
        os.kill(pid, signal.SIGKILL)
    except ProcessLookupError:  # pragma: no cover - it had just ended
        pass
    os.close(read_end)
    os.waitpid(pid, 0)


def _collect(pid: int, read_end: int, there: Callable[[], U]) -> U:
    """The child's result; ``there()`` run here when the child did not deliver one."""
    with os.fdopen(read_end, "rb") as source:
        payload = source.read()
    _, status = os.waitpid(pid, 0)
    if status == 0 and payload:
        try:
            result: U = pickle.loads(payload)
        except Exception:  # noqa: BLE001 - any undecodable result: compute it here instead
            return there()
        return result
    return there()
