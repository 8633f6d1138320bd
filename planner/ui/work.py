"""Running planner work off the widget thread: the newest request wins, older results are dropped.

The app sends every change to a :class:`Worker`; while it computes, the page stays live (the kernel keeps
answering widget messages) and the view shows "working". ``inline=True`` runs work at once in the caller's
thread, for tests and scripts.
"""

from __future__ import annotations

import threading
from collections.abc import Callable
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any


class Worker:
    """One background thread; each :meth:`submit` supersedes the requests before it.

    Parameters
    ----------
    inline : bool
        Run work in the calling thread (deterministic; used by headless tests).
    """

    def __init__(self, inline: bool = False):
        self.inline = inline
        self._pool = None if inline else ThreadPoolExecutor(max_workers=1, thread_name_prefix="coldmargin-work")
        self._lock = threading.Lock()
        self._generation = 0
        self._last: Future | None = None

    def submit(self, work: Callable[[], Any], done: Callable[[Any], None],
               failed: Callable[[BaseException], None]) -> Future | None:
        """Run ``work``; call ``done(result)`` or ``failed(error)`` unless a newer request came in."""
        with self._lock:
            self._generation += 1
            generation = self._generation

        def run() -> None:
            try:
                result = work()
            except Exception as exc:  # reported to the view as a message, never as a traceback
                if self._current(generation):
                    failed(exc)
                return
            if self._current(generation):
                done(result)

        if self._pool is None:
            run()
            return None
        self._last = self._pool.submit(run)
        return self._last

    def _current(self, generation: int) -> bool:
        with self._lock:
            return generation == self._generation

    def wait(self, timeout: float | None = 30.0) -> None:
        """Block until the latest request has finished (tests and scripts)."""
        if self._last is not None:
            self._last.result(timeout=timeout)

    @property
    def busy(self) -> bool:
        return self._last is not None and not self._last.done()
