"""Finish writing on a first interrupt: a finished run is not thrown away by one Ctrl-C.

Writing the outputs of a small run takes a good part of its time, so a Ctrl-C often
lands there.  While `finish_on_first_interrupt` is active, a first SIGINT (Ctrl-C) or
SIGTERM is noted and logged and the writing goes on; a second one stops it at once
(the folder then keeps its incomplete-outputs marker).  Signals can only be caught in
the main thread; elsewhere the block runs unchanged.
"""

import contextlib
import logging
import signal
import threading

__all__ = ["finish_on_first_interrupt"]

logger = logging.getLogger(__name__)


class _Deferred:
    """What happened during the block: ``interrupted`` is True after a first signal."""

    def __init__(self):
        self.interrupted = False

    def __call__(self, signum, frame):
        if self.interrupted:
            raise KeyboardInterrupt(f"signal {signum}, a second time while writing")
        self.interrupted = True
        logger.warning("interrupted while writing the outputs: finishing them (interrupt "
                       "again to abandon them)")


@contextlib.contextmanager
def finish_on_first_interrupt(already=False):
    """Defer a first SIGINT/SIGTERM until the block ends; yield the state.

    Parameters
    ----------
    already : bool
        The run was interrupted before (its result is labelled so): the next interrupt
        is the second and stops the writing at once, so nothing is deferred.

    Yields
    ------
    state
        ``state.interrupted`` is True when a first interrupt arrived during the block.

    Examples
    --------
    >>> with finish_on_first_interrupt() as state:
    ...     pass
    >>> state.interrupted
    False
    """
    state = _Deferred()
    if already or threading.current_thread() is not threading.main_thread():
        yield state
        return
    saved = {}
    try:
        for sig in (signal.SIGINT, signal.SIGTERM):
            saved[sig] = signal.signal(sig, state)
        yield state
    finally:
        for sig, handler in saved.items():
            signal.signal(sig, handler)
