"""Ctrl-C and SIGTERM: both stop the running command the same way; the exit status says which.

:func:`handling` makes SIGTERM (what ``kill`` and batch schedulers send) raise
:class:`KeyboardInterrupt` in the main thread exactly like Ctrl-C, so every
path that saves finished work on Ctrl-C does so on SIGTERM too; the command
line then exits with 128 + the signal number (130 for SIGINT, 143 for
SIGTERM), as shells do. A second signal while the first is being handled ends
the process at once (worker processes die with it, see
:func:`crn.runtime.workers.worker_initializer`).
"""

from __future__ import annotations

import contextlib
import os
import signal

__all__ = ["handling", "exit_status", "received", "reason", "call_interruptibly"]

_received: int | None = None


def _handler(signum, frame):
    global _received
    if _received is not None:
        os._exit(128 + _received)
    _received = signum
    raise KeyboardInterrupt


@contextlib.contextmanager
def handling():
    """Within the block, SIGINT and SIGTERM raise KeyboardInterrupt; restored afterwards.

    Only the main thread may install signal handlers; elsewhere this does nothing.
    """
    global _received
    _received = None
    try:
        previous = {s: signal.signal(s, _handler) for s in (signal.SIGINT, signal.SIGTERM)}
    except ValueError:  # not the main thread
        yield
        return
    try:
        yield
    finally:
        for s, handler in previous.items():
            signal.signal(s, handler)


def received() -> int | None:
    """The signal that interrupted the command (None: none, or an in-process Ctrl-C)."""
    return _received


def exit_status() -> int:
    """128 + the signal received: 130 for Ctrl-C (also when no handler recorded it), 143 for
    SIGTERM."""
    return 128 + (_received or signal.SIGINT)


def reason() -> str:
    """``"terminated"`` after SIGTERM, else ``"interrupted"``."""
    return "terminated" if _received == signal.SIGTERM else "interrupted"


def call_interruptibly(func, *args, **kwargs):
    """``func(*args, **kwargs)`` on a helper thread while this thread waits for it.

    Signals are handled in the main thread only, and only between Python
    steps; a long compiled computation (one that releases the GIL, as the
    configuration enumeration does) would otherwise delay Ctrl-C until it
    returns. Here the waiting thread raises KeyboardInterrupt at once; the
    helper thread is abandoned (a daemon: it ends with the process).

    Returns
    -------
    object
        What ``func`` returned; its exception is raised here.
    """
    import threading

    outcome = {}

    def work():
        try:
            outcome["value"] = func(*args, **kwargs)
        except BaseException as err:  # handed to the waiting thread
            outcome["error"] = err

    thread = threading.Thread(target=work, name="crn-work", daemon=True)
    thread.start()
    while thread.is_alive():
        thread.join(0.05)
    if "error" in outcome:
        raise outcome["error"]
    return outcome["value"]
