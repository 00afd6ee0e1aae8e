"""Before Qt starts: can the window start here? (``app.ui.preflight``, ``app.commands.window``)

Qt aborts the whole process (SIGABRT, exit 134) from inside QApplication() when its platform
plugin cannot load its libraries or reach the display. The promise (README, user guide):
the command finds this out first, prints what is missing in plain words (the libraries and
the apt packages that provide them, or the display), and ``flamebode`` with no arguments
then runs the headless demo instead.

Missing libraries are simulated by injecting what the probe sees (the child's exit code and
output, ldd's report); the real path is checked with child processes where Qt really cannot
start (xcb platform and no display, an unknown platform name). Qt's own abort text below is
what Qt 6 prints (from running it on this machine).
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from app.ui import preflight
from app.ui.preflight import Probe, Verdict, decide, missing_from_ldd, package_for

ROOT = Path(__file__).resolve().parents[2]

QT_ABORT = """qt.qpa.plugin: From 6.5.0, xcb-cursor0 or libxcb-cursor0 is needed to load the Qt xcb platform plugin.
qt.qpa.plugin: Could not load the Qt platform plugin "xcb" in "" even though it was found.
This application failed to start because no Qt platform plugin could be initialized. Reinstalling the application may fix this problem.

Available platform plugins are: minimal, linuxfb, offscreen, xcb, wayland, eglfs, vnc.
"""
LDD_TWO_MISSING = """\tlinux-vdso.so.1 (0x00007ffd)
\tlibxkbcommon-x11.so.0 => /lib/x86_64-linux-gnu/libxkbcommon-x11.so.0 (0x00007f1)
\tlibxcb-cursor.so.0 => /lib/x86_64-linux-gnu/libxcb-cursor.so.0 (0x00007f2)
\tlibxcb-icccm.so.4 => not found
\tlibxcb-keysyms.so.1 => not found
\tlibxcb-randr.so.0 => /lib/x86_64-linux-gnu/libxcb-randr.so.0 (0x00007f3)
\tlibxcb-icccm.so.4 => not found
"""
X_ENV = {"DISPLAY": ":0"}


def test_two_missing_xcb_libraries_are_named_with_their_packages() -> None:
    v = decide(-6, QT_ABORT, X_ENV, ldd_output=LDD_TWO_MISSING)
    assert not v.ok and v.platform == "xcb"
    assert v.missing_libraries == ("libxcb-icccm.so.4", "libxcb-keysyms.so.1")
    assert v.packages == ("libxcb-icccm4", "libxcb-keysyms1")
    msg = v.message()
    assert "libxcb-icccm.so.4, libxcb-keysyms.so.1" in msg
    assert msg.endswith("sudo apt-get install libxcb-icccm4 libxcb-keysyms1")
    assert "cursor" not in msg                  # Qt's own hint names libxcb-cursor0 whatever is missing


def test_packages_of_the_libraries_the_window_needs() -> None:
    assert [package_for(n) for n in ("libxcb-render-util.so.0", "libxcb-cursor.so.0", "libxkbcommon-x11.so.0",
                                     "libEGL.so.1", "libglib-2.0.so.0", "libdbus-1.so.3")] == \
        ["libxcb-render-util0", "libxcb-cursor0", "libxkbcommon-x11-0", "libegl1", "libglib2.0-0", "libdbus-1-3"]
    assert package_for("libsomething-odd.so.3") is None
    assert missing_from_ldd(LDD_TWO_MISSING) == ["libxcb-icccm.so.4", "libxcb-keysyms.so.1"]


def test_a_library_pyside6_itself_cannot_load_is_named() -> None:
    out = ("Traceback (most recent call last):\n  File \"<string>\", line 2, in <module>\n"
           "ImportError: libEGL.so.1: cannot open shared object file: No such file or directory\n")
    v = decide(1, out, X_ENV)
    assert not v.ok and v.missing_libraries == ("libEGL.so.1",) and v.packages == ("libegl1",)


def test_no_display_and_unknown_platform_and_timeout_are_said_plainly() -> None:
    no_display = "qt.qpa.xcb: could not connect to display \n" + QT_ABORT
    assert decide(-6, no_display, {}).reasons == ("no X display could be opened (DISPLAY is not set)",)
    assert "DISPLAY=:42" in decide(-6, no_display, {"DISPLAY": ":42"}).message()
    bogus = ('qt.qpa.plugin: Could not find the Qt platform plugin "bogus" in ""\n'
             "Available platform plugins are: minimal, offscreen, xcb.\n")
    v = decide(-6, bogus, {"QT_QPA_PLATFORM": "bogus"})
    assert v.platform == "bogus" and "no platform plugin named 'bogus'" in v.message()
    assert "available: minimal, offscreen, xcb" in v.message()
    assert "did not start within 10 s" in decide(None, "", X_ENV).message()
    assert decide(0, "platform=xcb\n", X_ENV) == Verdict(True, "xcb")


class _Child:
    """A stand-in for the probe's child process (Popen's communicate/kill/returncode)."""

    def __init__(self, returncode: int | None, output: str) -> None:
        self.returncode, self.output, self.killed = returncode, output, False

    def communicate(self, timeout: float | None = None) -> tuple[str, None]:
        if self.returncode is None and not self.killed:
            raise subprocess.TimeoutExpired("probe", timeout or 0)
        return self.output, None

    def kill(self) -> None:
        self.killed = True


def test_the_probe_runs_ldd_on_the_platform_plugin_only_after_a_failure() -> None:
    seen: list[Path] = []

    def ldd(path: Path) -> str:
        seen.append(path)
        return LDD_TWO_MISSING

    ok = Probe(env=X_ENV, popen=lambda *a, **k: _Child(0, "platform=xcb\n"), ldd=ldd).verdict()
    assert ok.ok and not seen
    bad = Probe(env=X_ENV, popen=lambda *a, **k: _Child(-6, QT_ABORT), ldd=ldd).verdict()
    assert not bad.ok and bad.packages == ("libxcb-icccm4", "libxcb-keysyms1")
    assert len(seen) == 1 and seen[0].name == "libqxcb.so"        # PySide6's own xcb plugin


def test_a_probe_that_hangs_is_killed_and_reported() -> None:
    child = _Child(None, "")
    v = Probe(env=X_ENV, timeout_s=0.1, popen=lambda *a, **k: child, ldd=lambda p: "").verdict()
    assert child.killed and not v.ok and "did not start within 0.1 s" in v.message()


# ---------------------------------------------------------------- the command's decision
@pytest.fixture
def command(monkeypatch):
    """The window command with the probe and the window replaced; returns a record of calls."""
    from app.commands import window as cmd
    from app.ui import app as ui_app

    calls: list[str] = []
    verdict = {"v": Verdict(True, "xcb")}

    class FakeProbe:
        def __init__(self, *a, **k) -> None:
            calls.append("probe started")

        def verdict(self) -> Verdict:
            calls.append("probe asked")
            return verdict["v"]

    monkeypatch.setattr(preflight, "Probe", FakeProbe)
    monkeypatch.setattr(ui_app, "application_exists", lambda: False)
    monkeypatch.setattr(ui_app, "load_window_code", lambda: calls.append("window code imported"))
    monkeypatch.setattr(ui_app, "run_window", lambda *a, **k: calls.append("window") or 0)
    monkeypatch.setattr(cmd, "headless_demo", lambda runs_root, why="": calls.append(f"demo: {why}") or 0)
    monkeypatch.setenv("DISPLAY", ":0")
    return calls, verdict


def test_the_probe_runs_while_the_window_code_is_imported(command) -> None:
    from app.cli import main

    calls, _ = command
    assert main(["window"]) == 0
    assert calls == ["probe started", "window code imported", "probe asked", "window"]


def test_first_run_falls_back_to_the_headless_demo_when_the_window_cannot_start(command, capsys) -> None:
    from app.cli import main

    calls, verdict = command
    verdict["v"] = decide(-6, QT_ABORT, X_ENV, ldd_output=LDD_TWO_MISSING)
    assert main([]) == 0
    assert calls[-1] == "demo: the window cannot start here" and "window" not in calls
    out = capsys.readouterr().out
    assert "libxcb-icccm.so.4, libxcb-keysyms.so.1" in out and "apt-get install libxcb-icccm4 libxcb-keysyms1" in out


def test_the_window_command_refuses_plainly_when_the_window_cannot_start(command, capsys) -> None:
    from app.cli import main

    calls, verdict = command
    verdict["v"] = decide(-6, QT_ABORT, X_ENV, ldd_output=LDD_TWO_MISSING)
    assert main(["window"]) == 2
    assert "window" not in calls and not any(c.startswith("demo") for c in calls)
    assert "apt-get install libxcb-icccm4 libxcb-keysyms1" in capsys.readouterr().err


# ---------------------------------------------------------------- real child processes
def _run(args: list[str], env_changes: dict[str, str | None], cwd: Path, code: str | None = None,
         timeout_s: float = 240) -> subprocess.CompletedProcess:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    for k, v in env_changes.items():
        if v is None:
            env.pop(k, None)
        else:
            env[k] = v
    cmd = [sys.executable, "-c", code, *args] if code else [sys.executable, "-m", "app.cli", *args]
    return subprocess.run(cmd, cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout_s)


SHORT_DEMO = """
import sys
from pathlib import Path
import app.commands.window as w
w.DEMO_PLAN = Path(sys.argv[1])          # the demo, shortened for the test
from app.cli import main
sys.exit(main([]))
"""


@pytest.mark.slow
@pytest.mark.timeout(300)
def test_no_arguments_with_xcb_and_no_display_runs_the_demo_instead_of_aborting(tmp_path: Path, tiny_plan) -> None:
    out = _run([str(tiny_plan)], {"QT_QPA_PLATFORM": "xcb", "DISPLAY": None, "WAYLAND_DISPLAY": None},
               tmp_path, code=SHORT_DEMO)
    assert out.returncode == 0, (out.returncode, out.stdout[-2000:], out.stderr[-2000:])     # not 134
    # which reason comes first depends on the machine: without the xcb libraries (a fresh
    # machine) the probe names them and their packages; with them, the missing display
    reasons = ("the window cannot start (Qt platform 'xcb'): no X display could be opened",
               "the window cannot start (Qt platform 'xcb'): these libraries are not installed:")
    assert any(r in out.stdout for r in reasons), out.stdout[-2000:]
    if reasons[1] in out.stdout:
        assert "apt-get install" in out.stdout and "libxcb" in out.stdout
    assert "running the demo sweep headless" in out.stdout and "the demo run is in" in out.stdout
    assert len(list((tmp_path / "runs").iterdir())) == 1


@pytest.mark.timeout(120)
def test_window_with_an_unknown_platform_is_a_plain_error_not_an_abort(tmp_path: Path) -> None:
    out = _run(["window"], {"QT_QPA_PLATFORM": "no-such-platform"}, tmp_path)
    assert out.returncode == 2, (out.returncode, out.stderr[-2000:])
    assert "Qt has no platform plugin named 'no-such-platform'" in out.stderr
    assert "Traceback" not in out.stderr


@pytest.mark.timeout(120)
def test_the_probe_passes_where_the_window_can_start() -> None:
    v = Probe(env={**os.environ, "QT_QPA_PLATFORM": "offscreen"}).verdict()
    assert v.ok and v.platform == "offscreen", v.message()
