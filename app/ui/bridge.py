"""The one bridge between worker threads and the GUI thread, and the task runner.

``EventBridge`` is subscribed to the engine's event bus. It is called on the engine's
thread and does nothing but emit a queued Qt signal carrying the (frozen) event, so every
slot runs on the GUI thread; bulk data (acquired blocks) may instead be handed to a
thread-safe sink right there, so the GUI thread never handles blocks one by one. ``TaskRunner`` runs blocking work (opening a back-end,
creating a run folder, accept/reject, reprocess, export, closing a sweep) on one worker
thread and hands each result back through a queued signal; the GUI thread never waits
for a driver or a file write.

Imports: PySide6 and the standard library only (this is the Qt side of the front end).
"""

from __future__ import annotations

import threading
from collections import deque
from concurrent.futures import Future, ThreadPoolExecutor
from typing import Any, Callable

from PySide6.QtCore import QObject, Qt, Signal, Slot


class EventBridge(QObject):
    """Engine thread -> GUI thread: re-emits engine events, in order, on the GUI thread.

    ``sink`` (optional) sees every event first, on the publishing thread; when it returns True
    it has taken the event (a block copied into a locked ring) and the event is not queued.
    It must be quick and thread-safe. Every other event is appended to a queue and, when the
    queue was empty, one queued wake-up signal is emitted; the GUI thread then drains
    everything pending. No event is dropped or merged, but a burst costs one cross-thread
    signal, not one each.
    """

    event = Signal(object)
    _wake = Signal()

    def __init__(self, parent: QObject | None = None, sink: Callable[[Any], bool] | None = None) -> None:
        super().__init__(parent)
        self.received = 0            # events delivered to the GUI thread (for tests and the benchmark)
        self.sunk = 0                # events taken by the sink on the publishing thread
        self._sink = sink
        self._pending: deque[Any] = deque()
        self._lock = threading.Lock()
        self._armed = False
        self._wake.connect(self._drain, Qt.ConnectionType.QueuedConnection)

    def __call__(self, event: Any) -> None:
        """Bus subscriber: runs on the publishing thread; hands to the sink or enqueues."""
        if self._sink is not None and self._sink(event):
            self.sunk += 1
            return
        with self._lock:
            self._pending.append(event)
            if self._armed:
                return
            self._armed = True
        self._wake.emit()

    @Slot()
    def _drain(self) -> None:
        with self._lock:
            batch = list(self._pending)
            self._pending.clear()
            self._armed = False
        for ev in batch:
            self.received += 1
            self.event.emit(ev)


class TaskResult:
    """What a finished task hands back: its name, its value or the exception it raised."""

    def __init__(self, name: str, value: Any = None, error: BaseException | None = None,
                 on_done: Callable[["TaskResult"], None] | None = None) -> None:
        self.name, self.value, self.error, self.on_done = name, value, error, on_done


class TaskRunner(QObject):
    """Runs callables on one worker thread, in order; results come back as queued signals."""

    finished = Signal(object)     # TaskResult
    _relay = Signal(object)

    def __init__(self, parent: QObject | None = None) -> None:
        super().__init__(parent)
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ui-task")
        self._extra: list[threading.Thread] = []
        self.busy: set[str] = set()
        self.closed = False
        self._relay.connect(self._deliver, Qt.ConnectionType.QueuedConnection)

    def submit(self, name: str, fn: Callable[[], Any],
               on_done: Callable[[TaskResult], None] | None = None) -> Future | None:
        if self.closed:
            return None
        self.busy.add(name)

        def work() -> None:
            try:
                result = TaskResult(name, fn(), None, on_done)
            except BaseException as exc:  # handed to the GUI thread, never raised on the worker
                result = TaskResult(name, None, exc, on_done)
            self._relay.emit(result)

        return self._pool.submit(work)

    def now(self, name: str, fn: Callable[[], Any]) -> None:
        """Run ``fn`` at once on its own short-lived thread (emergency halt must not queue)."""
        t = threading.Thread(target=fn, name=f"ui-{name}")
        self._extra.append(t)
        t.start()

    @Slot(object)
    def _deliver(self, result: TaskResult) -> None:
        self.busy.discard(result.name)
        if self.closed:
            return
        if result.on_done is not None:
            result.on_done(result)
        self.finished.emit(result)

    def shutdown(self) -> None:
        """Wait for queued tasks and short-lived threads (at window close)."""
        for t in self._extra:
            t.join(10.0)
        self._extra.clear()
        self._pool.shutdown(wait=True)
        self.closed = True
