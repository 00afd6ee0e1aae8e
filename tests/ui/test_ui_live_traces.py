"""The live-trace path off the GUI thread: blocks copied into the locked ring on the publishing
thread (nothing lost, no torn frame), the bridge queueing only the small events, and the
trace plots' y range that changes only when it must, and the engine's short pause per block
in a fast rehearsal.

Expectations are common practice for live plotting of streamed data: storage keeps every
sample, the display shows a consistent copy of the newest window.
"""

from __future__ import annotations

import threading

import numpy as np

from app.engine.events import BlockAcquired, DriveChanged, StateChanged
from app.ui.models import LiveTraces
from app.ui.views.traces import stable_range

FS_HZ = 1000.0
CHANNELS = ("p1", "p2", "light")


def _block(start: int, n: int) -> BlockAcquired:
    """Channel k carries start+i+1000*k at sample i: any torn or shifted copy is visible."""
    idx = start + np.arange(n, dtype=np.float64)
    data = idx[None, :] + 1000.0 * np.arange(len(CHANNELS))[:, None]
    return BlockAcquired(data=data, channels=CHANNELS, sample_rate_hz=FS_HZ, start_index=start, stage="recording",
                         point_index=0)


def _consistent(frame_data: np.ndarray) -> bool:
    """Every row is a run of consecutive samples and the rows are the same instants."""
    steps_ok = bool(np.all(np.diff(frame_data, axis=1) == 1.0))
    rows_ok = bool(np.all(frame_data - frame_data[0] == 1000.0 * np.arange(len(CHANNELS))[:, None]))
    return steps_ok and rows_ok


def test_blocks_from_another_thread_all_reach_the_ring_and_frames_are_never_torn() -> None:
    live = LiveTraces(seconds=0.2)
    sizes = [37, 100, 250, 1, 999, 100] * 40
    starts = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    taken: list[bool] = []

    def publish() -> None:
        for s, n in zip(starts, sizes):
            taken.append(live.offer(_block(int(s), n)))

    worker = threading.Thread(target=publish, name="test-publisher")
    worker.start()
    frames, state = [], None
    while worker.is_alive() or not frames:
        frame = live.frame(state)
        if frame is not None:
            frames.append(frame)
            state = frame.state
    worker.join(10.0)
    assert all(taken)
    assert live.buffer.total_samples == sum(sizes)
    assert all(_consistent(f.data) for f in frames if f.data.shape[1] > 1)
    t, data = live.buffer.snapshot(paced=False)
    window = live.buffer.window
    assert data.shape == (3, window)
    assert data[0, -1] == sum(sizes) - 1 and _consistent(data)     # the newest sample ends the window
    assert np.allclose(np.diff(t), 1.0 / FS_HZ) and t[-1] < 0.0


def test_frame_is_none_when_nothing_changed_and_small_events_are_not_taken() -> None:
    live = LiveTraces(seconds=0.05)
    assert live.frame() is None                                     # no block yet
    assert not live.offer(DriveChanged(freq_hz=100.0, amplitude_v=0.1, ceiling_v=1.0))
    live.offer(_block(0, 200))
    first = live.buffer.snapshot(paced=False)[1]
    assert _consistent(first) and first[0, -1] == 199.0
    frame = live.frame()
    assert frame is not None and frame.channels == CHANNELS
    live.reset()
    assert live.buffer is None and live.frame(frame.state) is None


def test_bridge_queues_only_the_small_events_in_order(qtbot) -> None:
    from app.ui.bridge import EventBridge

    live = LiveTraces(seconds=0.2)
    bridge = EventBridge(sink=live.offer)
    got: list[object] = []
    bridge.event.connect(got.append)
    small = [StateChanged(old="idle", new="tuning", point_index=i) for i in range(5)]

    def publish() -> None:
        for i, ev in enumerate(small):
            bridge(_block(100 * i, 100))
            bridge(ev)

    worker = threading.Thread(target=publish, name="test-publisher")
    worker.start()
    worker.join(10.0)
    qtbot.waitUntil(lambda: len(got) == len(small), timeout=5000)
    assert got == small and bridge.sunk == 5
    assert live.buffer.total_samples == 500


def test_y_range_holds_until_a_trace_leaves_it_or_shrinks_a_lot() -> None:
    first = stable_range(None, -1.0, 1.0)
    assert first[0] < -1.0 and first[1] > 1.0
    assert stable_range(first, -0.9, 0.95) == first                 # still fits: no axis redraw
    grown = stable_range(first, -2.0, 1.0)
    assert grown[0] < -2.0 and grown != first
    shrunk = stable_range(grown, -0.1, 0.1)
    assert shrunk[1] - shrunk[0] < (grown[1] - grown[0]) / 3.0
    flat = stable_range(None, 0.5, 0.5)                             # a constant trace still gets a range
    assert flat[0] < 0.5 < flat[1]


def test_trace_plots_are_rebuilt_when_the_roles_arrive_after_the_first_frame(qtbot) -> None:
    from app.ui.views.traces import TracesView

    live = LiveTraces(seconds=0.2)
    live.offer(_block(0, 300))
    view = TracesView()
    qtbot.addWidget(view)
    frame = live.frame()
    view.configure(frame.channels, {})                              # blocks drawn before the sweep's rig is known
    view.show_frame(frame)
    assert list(view.plots) == ["other"]
    view.configure(frame.channels, {"p1": "pressure", "p2": "pressure", "light": "light"})
    view.show_frame(frame)
    assert list(view.plots) == ["pressure", "light"] and set(view.curves) == set(CHANNELS)
    lo, hi = view.plots["light"].viewRange()[1]
    assert lo <= frame.data[2].min() and frame.data[2].max() <= hi     # the y range holds the light trace


def test_give_way_pauses_the_engine_thread_after_blocks_only() -> None:
    from app.ui.session import GiveWay

    slept: list[float] = []
    give_way = GiveWay(0.001, sleep=slept.append)
    give_way(StateChanged(old="idle", new="tuning", point_index=0))
    give_way(_block(0, 10))
    give_way(DriveChanged(freq_hz=100.0, amplitude_v=0.1, ceiling_v=1.0))
    give_way(_block(10, 10))
    assert slept == [0.001, 0.001]
