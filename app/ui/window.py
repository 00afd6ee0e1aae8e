"""The main window: set-up, the live sweep and review, with the run controls in one strip.

The engine runs on its own thread; its events reach the window only through the one
``EventBridge`` (queued signals) and feed the Qt-free models in ``app.ui.models``. Acquired
blocks are the exception: the bridge copies them into the locked ``LiveTraces`` ring on the
engine's thread, and a ~30 Hz timer redraws the live traces from one snapshot per frame. Everything that touches a driver or writes a
file (opening the back-end, the run folder, saving an editor, accept/reject, reprocess,
export, closing a sweep) goes to the ``TaskRunner``'s worker thread; the emergency halt
gets a thread of its own so it never waits behind other work.

The halt button sits in a plain strip above the tabs, never in a tool bar that could hide
it in an overflow menu; the window's minimum size keeps the strip whole. F12 halts from any
window of the application, a modal dialog included (an application event filter: Qt
blocks shortcuts behind a modal dialog); Esc halts while the main window is the active
window, so in a dialog it only closes the dialog. Closing the window halts a running sweep;
SIGINT/SIGTERM/SIGHUP (routed by ``app.ui.stop_signals``) halt it and quit.

Imports: PySide6, pyqtgraph (through the views), the engine's event types and states, the review
actions (``review_actions``, which call ``app.services``), the driver registry and the
simulator's truth (rehearsal overlay only). Never ``app.storage`` or ``app.commands``.
"""

from __future__ import annotations

import html
import math
import time
from pathlib import Path
from typing import Any

from PySide6.QtCore import QEvent, QObject, Qt, QTimer, Signal
from PySide6.QtGui import QAction, QCloseEvent, QKeyEvent, QKeySequence, QShortcut
from PySide6.QtWidgets import QApplication, QDialog, QLabel, QMainWindow, QSplitter, QTabWidget, \
    QVBoxLayout, QWidget

from app.engine import states as S
from app.engine.events import (DriveChanged, FaultRaised, Notice, PointSettled, StateChanged, SweepFinished,
                               SweepStarted, TransferMeasured, TuningStep)

from .bridge import EventBridge, TaskResult, TaskRunner
from .review_actions import ReviewActions
from .models import LiveTraces, PointTable, SweepStatus, TraceBuffer, TuningHistory, format_duration
from .session import SweepRequest, SweepSession
from .views.controls import ControlStrip
from .views.fault_banner import FaultBanner
from .views.halt_banner import HaltBanner
from .views.calibration import CalibrationView
from .views.calibration_run import CalibrationRunPanel, RunContext
from .views.commissioning import CommissioningPanel, PanelContext
from .views.points import PointListView
from .views.prescan import PrescanView, show_engine_news
from .views.response import ResponseView
from .views.review import ReviewView
from .views.setup import SetupView
from .views.style import CAUTION_STYLE, configure_pyqtgraph
from .views.traces import TracesView, channel_roles
from .views.tuning import TuningView

FRAME_MS = 27                     # ~37 frames/s nominal: >= 30 even when a tick comes late
TRACE_SECONDS = 0.2
FAST_YIELD_S = 0.001              # engine pause per block in a fast rehearsal (see session.GiveWay)
STATE_WORDS = {S.IDLE: "ready", S.PREPARING: "preparing the point", S.PRESCAN: "pre-scan: measuring the drive transfer",
               S.TUNING: "tuning the amplitude",
               S.SETTLING: "settling", S.RECORDING: "recording", S.EVALUATING: "computing gain and phase",
               S.STORING: "storing", S.PAUSED: "paused (drive at zero)", S.WINDING_DOWN: "ramping the drive down",
               S.FINISHED: "finished", S.ABORTED: "aborted (drive at zero)",
               S.HALTED: "HALTED (outputs zeroed)", S.FAULTED: "stopped by a fault (drive at zero)"}
NOT_LIVE = {"halted": "halted — outputs zeroed", "aborted": "aborted — drive ramped to zero",
            "fault": "ended by a fault — drive at zero", "complete": "sweep complete", "stopped": "sweep stopped"}
NOT_TRIGGERED = (S.PAUSED, S.HALTED, S.ABORTED, S.FAULTED, S.FINISHED)   # traces then show the whole 0.2 s
MIN_SIZE = (720, 540)             # the control strip and every tab fit (halt button whole) at this size
HALT_WHY_WINDOW = "emergency halt in the window"
HALT_WHY_CLOSED = "window closed during the sweep"
REAL_RIG_CAUTION = ("Real rig: forcing is loud — hearing protection on. The ceiling protects the speakers only if "
                    "set from their ratings. Flame, fuel and photomultiplier high voltage stay live: flamebode "
                    "zeroes only the drive. Your lab's rules come first.")


class HaltKeys(QObject):
    """Application event filter: F12 anywhere in the application halts (a modal dialog
    blocks ordinary shortcuts, so this looks at key presses before any widget)."""

    pressed = Signal()

    def eventFilter(self, watched: QObject, event: QEvent) -> bool:
        if event.type() == QEvent.Type.KeyPress and isinstance(event, QKeyEvent) and event.key() == Qt.Key.Key_F12:
            self.pressed.emit()
            return True
        return False


class MainWindow(ReviewActions, QMainWindow):
    def __init__(self, rig_path: str | Path, plan_path: str | Path, runs_root: str | Path = "runs",
                 backend: str = "simulated", fast: bool = False, scenario_path: str | Path | None = None,
                 backends: list[Any] | None = None) -> None:
        super().__init__()
        configure_pyqtgraph()
        self.setWindowTitle("flamebode — flame response sweeps")
        self.live = LiveTraces(TRACE_SECONDS)          # fed on the engine's thread by the bridge
        self.bridge = EventBridge(self, sink=self.live.offer)
        self.tasks = TaskRunner(self)
        self.bridge.event.connect(self._on_event)
        self.tasks.finished.connect(self._task_failed)
        self.status = SweepStatus()
        self.points = PointTable()
        self.tuning_model = TuningHistory()
        self.session: SweepSession | None = None
        self.last_run_dir: Path | None = None
        self.sweeps_closed = 0            # sweeps whose engine, writer and back-end are closed
        self.roles: dict[str, str] = {}
        self.exit_code: int | None = None   # set when a stop signal ends the application
        self.quit_message = ""
        self._build_setup(rig_path, plan_path, runs_root, backend, fast, scenario_path, backends)
        self._build_sweep_tab()
        self.review = ReviewView()
        self._wire_review()
        self.tabs = QTabWidget()
        self.tabs.addTab(self.setup, "Set-up")
        self.tabs.addTab(self.sweep_tab, "Sweep")
        self.tabs.addTab(self.review, "Review")
        self.sensor_run = CalibrationRunPanel(self._calibration_context)
        self.sensors = CalibrationView.as_tab(self.tabs, lambda: self.setup.rig_editor.path,   # read when shown
                                              side=self.sensor_run)
        self.sensor_run.busy_changed.connect(lambda _busy: self._update_controls())
        self.sensor_run.written.connect(self._calibration_written)
        self._build_commissioning()
        self._build_controls()
        central = QWidget()
        lay = QVBoxLayout(central)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.setSpacing(4)
        lay.addWidget(self.controls)
        lay.addWidget(self.halt_banner)
        lay.addWidget(self.tabs, 1)
        self.setCentralWidget(central)
        hint = self.minimumSizeHint()      # every tab and the control strip whole, never clipped
        self.setMinimumSize(max(hint.width(), MIN_SIZE[0]), max(hint.height(), MIN_SIZE[1]))
        self.timer = QTimer(self)
        self.timer.setTimerType(Qt.TimerType.PreciseTimer)   # a coarse timer may run 5 % slow: < 30 frames/s
        self.timer.setInterval(FRAME_MS)
        self.timer.timeout.connect(self._frame)
        self.timer.start()
        self._update_controls()
        self.resize(1400, 900)

    # ================================================================== building
    def _build_setup(self, rig_path: str | Path, plan_path: str | Path, runs_root: str | Path, backend: str,
                     fast: bool, scenario_path: str | Path | None, backends: list[Any] | None) -> None:
        self.setup = SetupView()
        if backends is None:
            from drivers.registry import list_backends

            backends = list_backends()
        self.setup.set_backends(backends, backend)
        self.setup.fast.setChecked(fast)
        self.setup.scenario.setText(str(scenario_path) if scenario_path else "")
        self.setup.runs_root.setText(str(runs_root))
        self.setup.rig_editor.load(Path(rig_path))
        self.setup.plan_editor.load(Path(plan_path))
        self.setup.rig_editor.save_requested.connect(self._save_file)
        self.setup.plan_editor.save_requested.connect(self._save_file)
        self.setup.backend.currentIndexChanged.connect(lambda _i: self._update_controls())
        for box in self.setup.checks.values():
            box.toggled.connect(lambda _on: self._update_controls())

    def _build_sweep_tab(self) -> None:
        self.banner = FaultBanner()
        self.traces = TracesView()
        self.tuning = TuningView(self.tuning_model)
        self.response = ResponseView(self.points)
        self.point_list = PointListView(self.points)
        self.state_label = QLabel()
        self.state_label.setStyleSheet("font-size: 14px; padding: 2px 6px;")
        self.state_label.setWordWrap(True)
        self.caution = QLabel(REAL_RIG_CAUTION)
        self.caution.setWordWrap(True)
        self.caution.setStyleSheet(CAUTION_STYLE)
        self.notice = QLabel()                   # the engine's notices (e.g. a survey's linear-only caution)
        self.notice.setWordWrap(True)
        self.notice.setStyleSheet(CAUTION_STYLE)
        self.notice.hide()
        self.prescan = PrescanView()             # shown when the sweep makes (or skips) a pre-scan
        self.prescan.hide()
        left = QSplitter(Qt.Orientation.Vertical)
        left.setObjectName("sweep-left")
        left.addWidget(self.traces)
        left.addWidget(self.tuning)
        left.addWidget(self.prescan)
        left.setStretchFactor(0, 3)
        left.setStretchFactor(1, 2)
        left.setStretchFactor(2, 2)
        right = QSplitter(Qt.Orientation.Vertical)
        right.setObjectName("sweep-right")
        right.addWidget(self.response)
        right.addWidget(self.point_list)
        right.setStretchFactor(0, 3)
        right.setStretchFactor(1, 2)
        split = QSplitter()
        split.setObjectName("sweep-split")
        split.addWidget(left)
        split.addWidget(right)
        self.sweep_tab = QWidget()
        lay = QVBoxLayout(self.sweep_tab)
        lay.setContentsMargins(4, 4, 4, 4)
        lay.addWidget(self.state_label)
        lay.addWidget(self.caution)
        lay.addWidget(self.notice)
        lay.addWidget(self.banner)
        lay.addWidget(split, 1)
        self.response.point_clicked.connect(lambda i: self.point_list.select_points([i]))
        self.point_list.selection_changed.connect(self.response.select)

    def _build_commissioning(self) -> None:
        """The Commissioning tab: the checks of ``flamebode commission`` on the worker thread."""
        self.commissioning = CommissioningPanel.as_tab(self.tabs, self.tasks.submit, self._commissioning_context)
        self.commissioning.busy_changed.connect(lambda _busy: self._update_controls())
        self.commissioning.recorded.connect(self.setup.refresh_commissioning)
        self.commissioning.rig_written.connect(self._rig_rewritten)

    def _commissioning_context(self) -> PanelContext:
        from app.errors import FlamebodeError
        from app.plan import load_plan

        s = self.setup
        scenario = Path(s.scenario.text()) if s.scenario.text().strip() else None
        if scenario is None and s.is_simulated() and s.plan_editor.path is not None:
            try:                            # the simulated rig the sweep would meet (a read, never a write)
                scenario = load_plan(s.plan_editor.path).resolve("scenario")
            except (FlamebodeError, OSError):
                scenario = None
        return PanelContext(s.rig_editor.path, s.rig_editor.dirty, s.backend_name(), scenario, s.fast.isChecked())

    def _calibration_context(self) -> RunContext:
        c = self._commissioning_context()
        other = "A commissioning check is running: the calibration waits until it has ended." \
            if self.commissioning.busy else ""
        return RunContext(c.rig_path, c.rig_unsaved, c.backend, c.scenario, c.fast, other)

    def _calibration_written(self, path: str) -> None:
        rig = self.setup.rig_editor.path
        if rig is not None:
            self.sensors.show_file(path, rig)
        self.setup.refresh_commissioning()

    def _rig_rewritten(self, path: str) -> None:
        """The dark offset went into the rig file: the editor shows the file as it now is."""
        editor = self.setup.rig_editor
        if editor.path is not None and Path(editor.path).resolve() == Path(path).resolve() and not editor.dirty:
            editor.load(Path(path))

    def _action(self, text: str, keys: list[str], slot: Any, tip: str,
                context: Qt.ShortcutContext = Qt.ShortcutContext.ApplicationShortcut) -> QAction:
        act = QAction(text, self)
        act.setShortcuts([QKeySequence(k) for k in keys])
        act.setShortcutContext(context)
        act.setToolTip(f"{tip} ({', '.join(keys)})" if keys else tip)
        act.triggered.connect(slot)
        self.addAction(act)
        return act

    def _build_controls(self) -> None:
        self.start_action = self._action("▶ Start", ["F5"], self.start_sweep, "start the sweep")
        self.pause_action = self._action("Pause", ["F6"], self.toggle_pause,
                                         "pause at the next step (drive to zero) / resume")
        self.stop_action = self._action("Stop after point", ["F7"], self.stop_after_point,
                                        "finish the point in progress, then end")
        self.abort_action = self._action("Abort", ["F8"], self.abort_sweep,
                                         "ramp the drive down now; stored points are kept")
        window_only = Qt.ShortcutContext.WindowShortcut
        self.open_action = self._action("Open run…", ["Ctrl+O"], self.choose_run, "open a stored run for review",
                                        window_only)
        self.export_action = self._action("Export", ["Ctrl+E"], self.export_run, "export the reviewed run",
                                          window_only)
        # the halt's keys are not the action's shortcuts: F12 through the application filter
        # (works behind a modal dialog), Esc only while this window is active
        self.halt_action = self._action("■ EMERGENCY HALT", [], lambda: self.emergency_halt(),
                                        "outputs to zero at once, without a ramp (F12 anywhere; Esc in this window)")
        self.halt_keys = HaltKeys(self)
        self.halt_keys.pressed.connect(lambda: self.emergency_halt())
        app = QApplication.instance()
        if app is not None:
            app.installEventFilter(self.halt_keys)
        self.esc_shortcut = QShortcut(QKeySequence("Esc"), self, lambda: self.emergency_halt(),
                                      context=window_only)
        self.controls = ControlStrip([self.start_action, self.pause_action, self.stop_action, self.abort_action,
                                      None, self.open_action], self.halt_action)
        self.sim_label = self.controls.sim_label
        self.halt_button = self.controls.halt_button
        self.halt_banner = HaltBanner()

    def _wire_review(self) -> None:
        r = self.review
        r.point_list.selection_changed.connect(self._review_selected)
        r.attempt_box.activated.connect(lambda _i: self._show_review_record())
        r.accept_button.clicked.connect(lambda: self.decide(True))
        r.reject_button.clicked.connect(lambda: self.decide(False))
        r.reacquire_button.clicked.connect(lambda: self.reacquire(r.point_list.selected()))
        r.reacquire_flagged_button.clicked.connect(
            lambda: self.reacquire(r.run.flagged_points() if r.run is not None else []))
        r.reprocess_button.clicked.connect(self.choose_reprocess_rig)
        r.export_button.clicked.connect(self.export_run)
        r.compare_button.clicked.connect(self.choose_compare)

    # ================================================================== run controls
    @property
    def engine(self) -> Any:
        return self.session.engine if self.session is not None else None

    def running(self) -> bool:
        return self.session is not None and not self.session.closed

    def start_sweep(self) -> bool:
        """Start a new sweep with the saved rig and plan files; False (with a message) when refused."""
        if self.running():
            return False
        refusal = self._start_refusal()
        if refusal:
            self._say(refusal)
            return False
        self.reset_live_view()
        req = self._request(points=None, run_dir=self._new_run_dir(), existing=False)
        self._launch(req)
        return True

    def _launch(self, req: SweepRequest) -> None:
        self.halt_banner.reset()
        self.session = SweepSession(req, self.bridge)
        self.status.state, self.status.finish_reason = "starting", None
        self.tabs.setCurrentWidget(self.sweep_tab)
        self.tasks.submit("start", self.session.open_and_start, on_done=self._started)
        self._update_controls()

    def _started(self, result: TaskResult) -> None:
        if result.error is not None:
            self._say(f"Could not start: {result.error}")
            self.status.state = "could not start"
            self.banner.show_problem("Could not start the sweep", str(result.error),
                                     "nothing was driven; the run folder keeps whatever it already held",
                                     "fix the problem named above (Set-up: rig, plan, back-end), then Start again")
            self.tabs.setCurrentWidget(self.sweep_tab)
            if self.session is not None:
                self.session.closed = True
            self._update_controls()

    def toggle_pause(self) -> None:
        eng = self.engine
        if eng is None or not self.running():
            return
        if self.status.state == S.PAUSED or self.status.state == "pause requested":
            eng.resume()
            if self.status.state == "pause requested":
                self.status.state = "resuming"
        else:
            eng.pause()
            if self.status.state != S.PAUSED:
                self.status.state = "pause requested"
        self._update_controls()

    def stop_after_point(self) -> None:
        if self.engine is not None and self.running():
            self.engine.stop()
            self._say("Stopping after the point in progress.")

    def abort_sweep(self) -> None:
        if self.engine is not None and self.running():
            self.engine.abort()
            self._say("Aborting: ramping the drive to zero; stored points are kept.")

    def emergency_halt(self, why: str = HALT_WHY_WINDOW) -> bool:
        """Outputs to zero at once, on a thread of its own (never the GUI thread, never queued).

        Works while the sweep is still being opened, too (the engine then never starts).
        False when no sweep runs (nothing is driven)."""
        self.commissioning.stop_recording(why)     # a commissioning recording (drive at zero) ends too
        if self.sensor_run.halt(why):              # a calibration drives the speaker: halted at once
            self.halt_banner.show_halt(why)
            self._say("EMERGENCY HALT: the calibration's output zeroed; nothing written.")
            return True
        session = self.session
        if session is None or not self.running():
            self._say("No sweep is running: nothing is driven.")
            return False
        if session.halt_why is None:
            self.tasks.now("halt", lambda: session.halt(why))
        self.halt_banner.show_halt(session.halt_why or why)
        self._say("EMERGENCY HALT: outputs zeroed.")
        return True

    def halt_now(self, why: str) -> bool:
        """Any thread (the stop-signal router): halt the running sweep at once; False if none runs.
        The GUI thread shows it later (``halt_and_quit`` or the sweep's end)."""
        calibrating = self.sensor_run.halt(why)
        session = self.session
        if session is None or session.closed:
            return calibrating
        session.halt(why)
        return True

    def halt_and_quit(self, why: str, exit_code: int) -> None:
        """A stop signal: halt as the halt button does, close any dialog and the window (which
        waits for the engine, the writer and the back-end to close), then quit the application."""
        if self.exit_code is not None:
            return
        self.exit_code = exit_code
        session = self.session
        halted_already = session is not None and session.halt_why == why     # by ``halt_now``, off this thread
        halted = self.emergency_halt(why) or halted_already
        self.quit_message = f"{why}: " + ("sweep halted, outputs zeroed" if halted else "no sweep was running")
        for w in QApplication.topLevelWidgets():
            if isinstance(w, QDialog) and w.isVisible():
                w.reject()
        self.close()
        QApplication.quit()

    def _start_refusal(self) -> str:
        s = self.setup
        for ed in (s.rig_editor, s.plan_editor):
            if ed.dirty:
                return f"Save the {ed.kind} file first (it has unsaved changes)."
            if not ed.check():
                return f"The {ed.kind} file has problems; see the Set-up tab."
        if not s.is_simulated() and not s.checklist_done():
            self.tabs.setCurrentWidget(s)
            return "Tick every item of the safety checklist before forcing on real hardware."
        return ""

    def _request(self, points: list[int] | None, run_dir: Path, existing: bool) -> SweepRequest:
        s = self.setup
        scenario = Path(s.scenario.text()) if s.scenario.text().strip() else None
        if scenario is None and s.is_simulated():
            from app.plan import load_plan

            scenario = load_plan(s.plan_editor.path).resolve("scenario")   # a read, never a write
        fast = s.fast.isChecked() and s.is_simulated()
        return SweepRequest(rig_path=Path(s.rig_editor.path), plan_path=Path(s.plan_editor.path), run_dir=run_dir,
                            backend=s.backend_name(), scenario_path=scenario,
                            fast=fast, points=points, existing_run=existing,
                            yield_per_block_s=FAST_YIELD_S if fast else 0.0)

    def _new_run_dir(self) -> Path:
        root = Path(self.setup.runs_root.text() or "runs")
        base = root / time.strftime("%Y%m%d-%H%M%S")
        out, k = base, 1
        while out.exists():
            out, k = base.with_name(f"{base.name}-{k}"), k + 1
        return out

    def reset_live_view(self) -> None:
        self.banner.reset()
        self.traces.mark_live()
        self.live.reset()
        self.tuning_model.steps, self.tuning_model.point_index = [], None
        self.tuning_model.notify()
        self.response.reset()

    # ================================================================== events (GUI thread)
    def _on_event(self, ev: Any) -> None:
        if isinstance(ev, StateChanged):
            self.status.state, self.status.point_index = ev.new, ev.point_index
            self.points.on_state(ev)
            if ev.new == "tuning" and self.traces.light_start_v is None:
                self.traces.light_start_v = self.traces.light_mean_v     # drive still off: the flame's own level
            if ev.new == "tuning" and ev.point_index is not None and self.points.row(ev.point_index) is not None:
                self.tuning_model.begin_point(ev.point_index, self.points.row(ev.point_index).target_ratio)
            if ev.new == S.PAUSED:
                self.traces.mark_stopped("paused — not live (drive at zero)")
            elif ev.old == S.PAUSED:
                self.traces.mark_live()
            self._update_controls()
        elif isinstance(ev, DriveChanged):
            self.status.drive_v, self.status.freq_hz = ev.amplitude_v, ev.freq_hz
        elif isinstance(ev, TuningStep):
            self.tuning_model.add(ev)
        elif isinstance(ev, PointSettled):
            self.points.on_settled(ev)
            self.status.n_done = self.points.n_done
        elif isinstance(ev, FaultRaised):
            self.banner.show_fault(ev)
            self.points.on_fault(ev)
        elif isinstance(ev, (TransferMeasured, Notice)):
            show_engine_news(ev, self.prescan, self.notice, getattr(self.session, "plan", None))
        elif isinstance(ev, SweepStarted):
            self.notice.hide()
            self._on_started(ev)
        elif isinstance(ev, SweepFinished):
            self._on_finished(ev)

    def _on_started(self, ev: SweepStarted) -> None:
        req = self.session.request if self.session else None
        if req is not None and not req.existing_run:
            self.points.set_plan(ev.plan.points())
        n = len(ev.plan.points()) if req is None or req.points is None else len(req.points)
        self.status.begin(n, ev.plan.estimated_duration_s(ramp_time_s=ev.rig.drive.ramp_time) * n /
                          max(1, len(ev.plan.points())))
        self.status.ceiling_v = ev.plan.ceiling_v(ev.rig)
        self.tuning_model.max_steps = int(ev.plan.tuning.max_steps)
        self.tuning.set_ceiling(self.status.ceiling_v)
        self.roles = channel_roles(ev.rig)
        self.traces.set_scales({s.channel: 1.0 / s.sensitivity for s in ev.rig.pressure_sensors})
        self.traces.light_start_v = None
        freqs = [p.freq_hz for p in ev.plan.points()]
        self.response.set_truth(self._truth_for(ev, req), (0.9 * min(freqs), 1.05 * max(freqs)))

    def _truth_for(self, ev: SweepStarted, req: SweepRequest | None) -> Any:
        if req is None or not (ev.backend or "").startswith("simulated"):
            return None
        scenario = req.scenario_path
        if req.existing_run:
            src = self.review.run.info.get("scenario_source") if self.review.run is not None else None
            scenario = Path(src) if src else None
        if scenario is None or not Path(scenario).exists():
            return None
        from drivers.simulated.truth import true_ftf

        to_peak = ev.plan.amplitude.to_peak
        return lambda f, amp: true_ftf(scenario, f, amp * to_peak)

    def _on_finished(self, ev: SweepFinished) -> None:
        self.status.finish_reason = ev.reason
        self.points.on_finished()
        self.traces.mark_stopped(f"stopped — not live ({NOT_LIVE.get(ev.reason, ev.reason)})")
        if ev.reason == "halted":
            self.halt_banner.show_halt(getattr(ev, "detail", "") or "")
        self._update_controls()
        session = self.session
        if session is None:
            return
        self.tasks.submit("close", session.close, on_done=self._closed)

    def _closed(self, result: TaskResult) -> None:
        session = self.session
        self._update_controls()
        if session is None:
            return
        if session.final_drive_v is not None:
            self.status.drive_v = session.final_drive_v
        if result.error is not None:          # the engine ended on an internal error: say so as a fault
            self.banner.show_fault(FaultRaised(
                name="internal-error", message=str(result.error), point_index=self.status.point_index,
                action="drive brought to zero; sweep ended; every stored point is kept",
                advice="keep the run folder and report the message; continue with 'flamebode resume RUN_DIR' "
                       "or re-acquire the missing points from the Review tab", fatal=True))
        fault = session.storage_fault
        if fault:
            self._say(f"Storage fault: {fault}")
        run_dir = Path(session.request.run_dir)
        self.last_run_dir = run_dir
        self.sweeps_closed += 1
        self.open_review(run_dir, show=False)   # the operator keeps the sweep (and any fault banner) in view

    @property
    def traces_buffer(self) -> TraceBuffer | None:
        """The live ring buffer (None before the first block of a sweep); read-only use."""
        return self.live.buffer

    def _frame(self) -> None:
        """~30 Hz: redraw traces from a snapshot of the live ring; refresh the state line."""
        frame = self.live.frame(self.traces.drawn_state)
        if frame is not None:
            self.traces.configure(frame.channels, self.roles or {}, window_s=TRACE_SECONDS)
            live_drive = self.status.drive_v > 0 and self.status.state not in NOT_TRIGGERED
            self.traces.show_frame(frame, self.status.freq_hz if live_drive else 0.0)
        self._state_line()

    def _state_line(self) -> None:
        st = self.status
        words = STATE_WORDS.get(st.state, st.state)
        if st.finish_reason:
            words = STATE_WORDS.get({"complete": S.FINISHED, "stopped": S.FINISHED, "aborted": S.ABORTED,
                                     "halted": S.HALTED, "fault": S.FAULTED}.get(st.finish_reason, ""), words)
        point = ""
        if st.point_index is not None and self.points.row(st.point_index) is not None:
            r = self.points.row(st.point_index)
            point = f" — point {r.index + 1} of {len(self.points.rows)}, {r.freq_hz:g} Hz, |u'|/ū {r.target_ratio:g}"
        left = st.time_left_s()
        tail = (f" — {st.n_done}/{st.n_points} done, about {format_duration(left)} left"
                if st.n_points and math.isfinite(left) else "")
        drive = f" — drive {st.drive_v:.3f} V (ceiling {st.ceiling_v:.2f} V)" if math.isfinite(st.ceiling_v) else ""
        self.state_label.setText(f"<b>{words}</b>{point}{tail}{drive}")

    # ================================================================== controls state
    def _update_controls(self) -> None:
        running = self.running()
        sim = self.setup.is_simulated()
        self.controls.show_backend(sim, self.setup.backend_name())
        self.caution.setVisible(not sim)
        calibrating = self.sensor_run.busy
        can_start = not running and not self.commissioning.busy and not calibrating \
            and (sim or self.setup.checklist_done())
        self.commissioning.set_sweep_running(running)
        self.commissioning.set_blocked("A pressure calibration is running (Sensors tab): the checks wait until it "
                                       "has ended." if calibrating else "")
        self.sensor_run.set_blocked("A sweep is running: the calibration waits until it has ended." if running else
                                    "A commissioning check is running." if self.commissioning.busy else "")
        self.start_action.setEnabled(can_start)
        for act in (self.pause_action, self.stop_action, self.abort_action):
            act.setEnabled(running)
        self.pause_action.setText("Resume" if self.status.state in (S.PAUSED, "pause requested") else "Pause")
        self.halt_action.setEnabled(True)      # always there; does nothing when no sweep runs
        self.review.set_enabled(self.review.run is not None and not running and self.review.run.index_readable)

    def _say(self, text: str) -> None:
        self.statusBar().showMessage(text, 15000)

    def _task_failed(self, result: TaskResult) -> None:
        if result.error is not None and result.name not in ("start", "close") \
                and not result.name.startswith("commission"):     # the commissioning panel says its own
            self._say(f"{result.name} failed: {result.error}")
            text = f"{result.name} failed: {result.error}"
            if result.name == "open run" and self.review.run is not None:
                text += f" — still showing {self.review.run.run_dir}"
            self.review.message.setText(f"<b style='color:#C62828'>{html.escape(text, quote=False)}</b>")

    # ================================================================== files (worker thread)
    def _save_file(self, path: str, text: str) -> None:
        editor = self.setup.rig_editor if path == str(self.setup.rig_editor.path) else self.setup.plan_editor

        def write() -> str:
            tmp = Path(path).with_name(f".{Path(path).name}.part")
            tmp.write_text(text, encoding="utf-8")
            tmp.replace(path)
            return path

        def done(result: TaskResult) -> None:
            if result.error is None:
                editor.mark_saved()

        self.tasks.submit("save", write, on_done=done)

    # ================================================================== closing
    def shutdown(self, why: str = HALT_WHY_CLOSED) -> None:
        """Halt any sweep (outputs to zero at once), close it, then wait for the worker threads."""
        self.timer.stop()
        app = QApplication.instance()
        if app is not None:
            app.removeEventFilter(self.halt_keys)
        session = self.session
        if session is not None and not session.closed:
            if session.halt_why is None:
                self.tasks.now("halt", lambda: session.halt(why))

            def halt_and_close() -> None:   # after a queued start, too
                session.halt(why)
                session.close()

            self.tasks.submit("close", halt_and_close)
        self.commissioning.stop_recording(why)     # a recording in progress ends at its next block
        self.sensor_run.shutdown(why)              # a calibration's output zeroed at once, its thread joined
        self.tasks.shutdown()

    def closeEvent(self, event: QCloseEvent) -> None:
        from . import settings

        settings.save(self)        # before the shutdown: what the person arranged, not a torn-down window
        self.shutdown()
        super().closeEvent(event)
