"""The sweep's states and the one table of allowed transitions.

``TRANSITIONS`` lists every state and the states it may go to; ``StateMachine.set`` is the
only way to change state: it takes a lock, refuses anything not in the table with
``IllegalTransition`` and publishes a ``StateChanged`` event. Terminal states have no exits:
an engine runs one sweep.

Before the first point (when the plan asks for it) the engine goes preparing -> pre-scan ->
preparing. Per point the engine goes preparing -> tuning -> settling -> recording -> evaluating ->
storing -> preparing (next point). ``paused`` holds the drive at zero between steps;
``winding-down`` ramps the drive to zero before ``finished``, ``aborted`` or ``faulted``;
``halted`` is reached from anywhere, with the outputs already zeroed at once.

Imports: standard library and ``app.engine.events`` only.
"""

from __future__ import annotations

import threading
from typing import Callable

from .events import Event, StateChanged

IDLE = "idle"
PREPARING = "preparing"
PRESCAN = "pre-scan"
TUNING = "tuning"
SETTLING = "settling"
RECORDING = "recording"
EVALUATING = "evaluating"
STORING = "storing"
PAUSED = "paused"
WINDING_DOWN = "winding-down"
FINISHED = "finished"
ABORTED = "aborted"
HALTED = "halted"
FAULTED = "faulted"

TERMINAL = frozenset({FINISHED, ABORTED, HALTED, FAULTED})

# state -> the states it may go to. Halt is allowed from every live state.
TRANSITIONS: dict[str, frozenset[str]] = {
    IDLE: frozenset({PREPARING, WINDING_DOWN, HALTED}),
    PREPARING: frozenset({TUNING, PRESCAN, PAUSED, WINDING_DOWN, HALTED}),
    # the drive-to-velocity transfer by a low multi-sine: before the first point, or before
    # re-tuning after a long pause; then back to where it was called from
    PRESCAN: frozenset({PREPARING, TUNING, WINDING_DOWN, HALTED}),
    # tuning -> preparing: the point was skipped (unreachable target, pressure limit)
    TUNING: frozenset({SETTLING, PREPARING, PRESCAN, PAUSED, WINDING_DOWN, HALTED}),
    SETTLING: frozenset({RECORDING, PAUSED, WINDING_DOWN, HALTED}),
    # recording is never paused: the record finishes, is evaluated and stored first
    RECORDING: frozenset({EVALUATING, WINDING_DOWN, HALTED}),
    # evaluating -> preparing: the record could not be evaluated; the point is flagged, the sweep goes on
    EVALUATING: frozenset({STORING, PREPARING, WINDING_DOWN, HALTED}),
    STORING: frozenset({PREPARING, PAUSED, WINDING_DOWN, HALTED}),
    # resume: back to tuning (re-tune the point) or to preparing (the next point)
    PAUSED: frozenset({TUNING, PREPARING, WINDING_DOWN, HALTED}),
    WINDING_DOWN: frozenset({FINISHED, ABORTED, FAULTED, HALTED}),
    FINISHED: frozenset(),
    ABORTED: frozenset(),
    HALTED: frozenset(),
    FAULTED: frozenset(),
}

ALL_STATES = tuple(TRANSITIONS)


class IllegalTransition(RuntimeError):
    """A state change not in the table (a programming error, never a user error)."""

    def __init__(self, old: str, new: str):
        self.old, self.new = old, new
        super().__init__(f"illegal state change {old!r} -> {new!r}; allowed from {old!r}: "
                         f"{', '.join(sorted(TRANSITIONS.get(old, ()))) or 'none'}")


class StateMachine:
    """Holds the current state; ``set`` is the one locked setter that announces each change."""

    def __init__(self, publish: Callable[[Event], None], initial: str = IDLE):
        if initial not in TRANSITIONS:
            raise ValueError(f"unknown state {initial!r}")
        self._state = initial
        self._lock = threading.RLock()  # re-entrant: a subscriber may read .state
        self._publish = publish

    @property
    def state(self) -> str:
        with self._lock:
            return self._state

    def can_go(self, new: str) -> bool:
        with self._lock:
            return new in TRANSITIONS[self._state]

    def set(self, new: str, point_index: int | None = None) -> str:
        """Change to ``new`` or raise IllegalTransition; returns the old state."""
        if new not in TRANSITIONS:
            raise ValueError(f"unknown state {new!r}")
        with self._lock:
            old = self._state
            if new not in TRANSITIONS[old]:
                raise IllegalTransition(old, new)
            self._state = new
            # published under the lock so subscribers see changes in the order they happened
            self._publish(StateChanged(old=old, new=new, point_index=point_index))
        return old
