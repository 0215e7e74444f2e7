"""The app's one save thread: store writes run in order, off the UI thread (no kivy)."""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable
from typing import Any

__all__ = ["SaveWorker"]


class SaveWorker:
    """One background thread that runs store writes in order; a newer job for a trip replaces a waiting one."""

    def __init__(self, on_error: Callable[[BaseException], None] | None = None) -> None:
        self._q: queue.Queue[str] = queue.Queue()  # trip ids with a job waiting
        self._pending: dict[str, Callable[[], Any]] = {}
        self._lock = threading.Lock()
        self._idle = threading.Event()
        self._idle.set()
        self._on_error = on_error
        self._thread = threading.Thread(target=self._run, name="streamtab-save", daemon=True)
        self._thread.start()

    def submit(self, key: str, job: Callable[[], Any]) -> None:
        with self._lock:
            fresh = key not in self._pending
            self._pending[key] = job
            self._idle.clear()
        if fresh:
            self._q.put(key)

    def _run(self) -> None:
        while True:
            key = self._q.get()
            with self._lock:
                job = self._pending.pop(key, None)
            if job is not None:
                try:
                    job()
                except BaseException as exc:  # noqa: BLE001 - reported to the screen; the worker keeps going
                    if self._on_error:
                        self._on_error(exc)
            with self._lock:
                if not self._pending:
                    self._idle.set()

    def flush(self, timeout: float = 10.0) -> bool:
        """Waits until every submitted write has finished (on pause, on stop, in tests)."""
        return self._idle.wait(timeout)
