"""The state table: every illegal transition is refused, every legal one is announced.

Checks are against the table itself (common practice for explicit state machines: the
table is the specification, the setter must enforce it exactly).
"""

from __future__ import annotations

import threading

import pytest

from app.engine import states as S
from app.engine.events import StateChanged

ILLEGAL = [(old, new) for old in S.ALL_STATES for new in S.ALL_STATES if new not in S.TRANSITIONS[old]]
LEGAL = [(old, new) for old in S.ALL_STATES for new in S.TRANSITIONS[old]]


def _machine_at(state: str, events: list) -> S.StateMachine:
    return S.StateMachine(events.append, initial=state)


@pytest.mark.parametrize(("old", "new"), ILLEGAL)
def test_illegal_transition_is_refused(old: str, new: str) -> None:
    events: list = []
    m = _machine_at(old, events)
    with pytest.raises(S.IllegalTransition) as info:
        m.set(new)
    assert m.state == old and events == []
    assert repr(old) in str(info.value) and repr(new) in str(info.value)


@pytest.mark.parametrize(("old", "new"), LEGAL)
def test_legal_transition_is_published(old: str, new: str) -> None:
    events: list = []
    m = _machine_at(old, events)
    m.set(new, point_index=3)
    assert m.state == new
    assert events == [StateChanged(old=old, new=new, point_index=3, wall_time_s=events[0].wall_time_s)]


def test_table_shape() -> None:
    # terminal states have no exits; every live state can be halted; every state is reachable
    assert all(not S.TRANSITIONS[t] for t in S.TERMINAL)
    live = set(S.ALL_STATES) - S.TERMINAL
    assert all(S.HALTED in S.TRANSITIONS[s] for s in live)
    reachable = {S.IDLE}
    frontier = [S.IDLE]
    while frontier:
        for nxt in S.TRANSITIONS[frontier.pop()]:
            if nxt not in reachable:
                reachable.add(nxt)
                frontier.append(nxt)
    assert reachable == set(S.ALL_STATES)
    assert S.PAUSED not in S.TRANSITIONS[S.RECORDING]   # a record is never paused half-way


def test_unknown_state_is_an_error() -> None:
    m = S.StateMachine(lambda e: None)
    with pytest.raises(ValueError):
        m.set("sleeping")


def test_concurrent_setters_publish_in_order() -> None:
    events: list = []
    m = S.StateMachine(events.append, initial=S.PREPARING)
    cycle = [S.TUNING, S.PAUSED, S.PREPARING]
    barrier = threading.Barrier(4)

    def worker() -> None:
        barrier.wait()
        for _ in range(200):
            for target in cycle:
                try:
                    m.set(target)
                except S.IllegalTransition:
                    pass

    threads = [threading.Thread(target=worker) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    # published changes chain exactly: each event starts where the previous one ended
    assert all(a.new == b.old for a, b in zip(events, events[1:]))
    assert events and events[-1].new == m.state
