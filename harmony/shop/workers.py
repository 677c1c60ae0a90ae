"""Local worker processes that never outlive the run that forked them.

The palette extraction and the feed both run tasks in a :class:`concurrent.futures.
ProcessPoolExecutor`. A worker started by :func:`start_worker` ignores SIGINT and SIGTERM (a
signal to the whole process group is the parent's to handle: it stops the run, says so in one
line and kills the workers with :func:`kill_workers`), closes file descriptors it must not hold
(a store's writer lock), and dies with its parent, even one killed with SIGKILL.
"""

import contextlib
import os
import signal
import sys
import threading
import time

__all__ = ["start_worker", "kill_workers"]

#: prctl(2) option that asks the kernel for a signal when the parent dies (linux/prctl.h).
_PR_SET_PDEATHSIG = 1
#: Seconds between two looks at the parent where the kernel cannot watch it for us.
_PARENT_POLL = 0.5


def start_worker(parent_pid, close_fds=()):
    """Initialiser of each worker process: never outlive the run, never hold ``close_fds``."""
    for fd in close_fds:  # inherited through fork; a lock must die with the parent alone
        with contextlib.suppress(OSError):
            os.close(fd)
    # The parent handles SIGINT / SIGTERM sent to the whole process group and then kills us.
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_IGN)
    if not _ask_kernel_for_parent_death():
        threading.Thread(target=_watch_parent, args=(parent_pid,), daemon=True).start()
    if os.getppid() != parent_pid:  # the parent died before the watch began
        os._exit(1)


#: Seconds to wait for a killed worker to be gone.
_KILL_WAIT = 10.0


def kill_workers(pool):
    """Kill the worker processes of a ProcessPoolExecutor now, running tasks and all, so that
    ``pool.shutdown(wait=True)`` returns at once."""
    # ProcessPoolExecutor has no public way to stop running tasks; its worker table is
    # ``_processes`` (CPython 3.8+). Without it the workers still die with this process.
    processes = list((getattr(pool, "_processes", None) or {}).values())
    for process in processes:
        with contextlib.suppress(Exception):
            process.kill()
    for process in processes:
        with contextlib.suppress(Exception):
            process.join(_KILL_WAIT)
    # A worker killed while it sent a result leaves half a message in the result pipe, and the
    # pool's manager thread would wait for the rest for ever (and shutdown, and the interpreter's
    # exit, for that thread). With every writer gone (the workers dead, this process's copy
    # closed: ``_result_queue._writer``, CPython 3.8+) it reads end-of-file instead and stops.
    writer = getattr(getattr(pool, "_result_queue", None), "_writer", None)
    if writer is not None:
        with contextlib.suppress(Exception):
            writer.close()


def _ask_kernel_for_parent_death():
    """PR_SET_PDEATHSIG = SIGKILL on Linux (prctl(2)); False where it is not available."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        import ctypes

        libc = ctypes.CDLL(None, use_errno=True)
        return libc.prctl(_PR_SET_PDEATHSIG, int(signal.SIGKILL), 0, 0, 0) == 0
    except (OSError, AttributeError):
        return False


def _watch_parent(parent_pid):
    while os.getppid() == parent_pid:
        time.sleep(_PARENT_POLL)
    os._exit(1)
