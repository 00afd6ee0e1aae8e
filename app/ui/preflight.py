"""Can the window start here? Decided before any QApplication exists.

When Qt's platform plugin cannot load its libraries or reach the display, Qt aborts the
whole process from inside ``QApplication()`` (SIGABRT, exit 134): nothing in Python can
catch it, and a first-run user would see Qt's message and no headless fallback. So a child
process tries first: ``python -c`` creating a ``QGuiApplication`` with the same environment
(same platform, same display), under a timeout. It is started at once and runs while the
parent imports the window code (seconds), so a normal start hardly waits for it (measured:
docs/user-guide.md, "When the window cannot start"). Nothing is cached on disk.

When the child fails, the reason is put in plain words: the platform plugin's libraries
that the dynamic loader cannot find (``ldd`` on the plugin, only on this failure path; Qt's
own message names libxcb-cursor0 whatever is missing) with the Debian/Ubuntu packages that
provide them, an X display that cannot be opened, or an unknown platform name.

Every input is injectable (the child's exit code and output, ldd's output), so the decision
is tested without breaking a machine.

Must not import Qt: it decides whether Qt may be started. Standard library only.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Mapping

PROBE_CODE = ("import sys\nfrom PySide6.QtGui import QGuiApplication\n"
              "app = QGuiApplication(['flamebode-probe'])\nprint('platform=' + app.platformName())\n")
PROBE_TIMEOUT_S = 10.0

# soname -> Debian/Ubuntu package (what the window and its platform plugins load)
PACKAGES = {
    "libEGL.so.1": "libegl1", "libGL.so.1": "libgl1", "libOpenGL.so.0": "libopengl0", "libGLX.so.0": "libglx0",
    "libGLdispatch.so.0": "libglvnd0", "libfontconfig.so.1": "libfontconfig1", "libfreetype.so.6": "libfreetype6",
    "libxkbcommon.so.0": "libxkbcommon0", "libxkbcommon-x11.so.0": "libxkbcommon-x11-0",
    "libglib-2.0.so.0": "libglib2.0-0", "libgthread-2.0.so.0": "libglib2.0-0", "libdbus-1.so.3": "libdbus-1-3",
    "libX11.so.6": "libx11-6", "libX11-xcb.so.1": "libx11-xcb1", "libxcb.so.1": "libxcb1",
    "libXau.so.6": "libxau6", "libXdmcp.so.6": "libxdmcp6", "libpng16.so.16": "libpng16-16",
    "libwayland-client.so.0": "libwayland-client0", "libwayland-cursor.so.0": "libwayland-cursor0",
    "libwayland-egl.so.1": "libwayland-egl1",
}
_XCB = re.compile(r"^libxcb-([a-z0-9-]+)\.so\.(\d+)$")      # libxcb-render-util.so.0 -> libxcb-render-util0
_NOT_FOUND = re.compile(r"^\s*(\S+\.so[.\d]*)\s+=>\s+not found", re.MULTILINE)
_CANNOT_OPEN = re.compile(r"(lib[\w.+-]+\.so[.\d]*): cannot open shared object file")
_NO_PLUGIN = re.compile(r'Could not find the Qt platform plugin "([^"]*)"')
_LOAD_FAIL = re.compile(r'Could not load the Qt platform plugin "([^"]*)"')
_AVAILABLE = re.compile(r"Available platform plugins are: ([^\n]*?)\.?\s*$", re.MULTILINE)


def package_for(soname: str) -> str | None:
    """The Debian/Ubuntu package that provides ``soname``, where known."""
    if soname in PACKAGES:
        return PACKAGES[soname]
    m = _XCB.match(soname)
    return f"libxcb-{m.group(1)}{m.group(2)}" if m else None


def missing_from_ldd(text: str) -> list[str]:
    """Library names ldd reports as 'not found', in order, once each."""
    return list(dict.fromkeys(_NOT_FOUND.findall(text)))


def missing_from_output(text: str) -> list[str]:
    """Library names a failed import or plugin load names ('cannot open shared object file')."""
    return list(dict.fromkeys(_CANNOT_OPEN.findall(text)))


def expected_platform(env: Mapping[str, str]) -> str:
    """The platform Qt will try first with this environment (QT_QPA_PLATFORM, else the session's)."""
    chosen = env.get("QT_QPA_PLATFORM", "").split(";")[0].split(":")[0].strip()
    if chosen:
        return chosen
    if env.get("WAYLAND_DISPLAY") and env.get("XDG_SESSION_TYPE") == "wayland":
        return "wayland"
    return "xcb"


def failed_platform(output: str, env: Mapping[str, str]) -> str:
    """The platform Qt says it could not find or load, else the one it was expected to try."""
    for pattern in (_NO_PLUGIN, _LOAD_FAIL):
        found = pattern.search(output)
        if found and found.group(1):
            return found.group(1)
    return expected_platform(env)


def plugin_file(platform: str, env: Mapping[str, str]) -> Path | None:
    """The platform plugin's shared library (PySide6's own, or under QT_QPA_PLATFORM_PLUGIN_PATH)."""
    dirs = [Path(d) for d in env.get("QT_QPA_PLATFORM_PLUGIN_PATH", "").split(os.pathsep) if d]
    try:
        import importlib.util

        spec = importlib.util.find_spec("PySide6")      # finds the package without importing Qt
        if spec is not None and spec.origin:
            dirs.append(Path(spec.origin).parent / "Qt" / "plugins" / "platforms")
    except (ImportError, ValueError):
        pass
    name = "libq" + platform.replace("-", "") + ".so"
    for d in dirs:
        if (d / name).is_file():
            return d / name
    return None


def run_ldd(path: Path, run: Callable[..., subprocess.CompletedProcess] = subprocess.run) -> str:
    """ldd's report on ``path`` ('' when ldd is unavailable)."""
    try:
        return run(["ldd", str(path)], capture_output=True, text=True, timeout=10).stdout
    except (OSError, subprocess.SubprocessError):
        return ""


@dataclass(frozen=True)
class Verdict:
    """Whether the window can start; if not, why, in words a user can act on."""

    ok: bool
    platform: str
    reasons: tuple[str, ...] = ()
    missing_libraries: tuple[str, ...] = ()
    packages: tuple[str, ...] = ()
    waited_s: float = 0.0           # how long the caller waited for the child (after its own work)
    qt_output: str = field(default="", repr=False)

    def message(self) -> str:
        if self.ok:
            return f"the window can start (platform {self.platform})"
        text = f"the window cannot start (Qt platform '{self.platform}'): " + "; ".join(self.reasons)
        if self.packages:
            text += f". On Debian/Ubuntu: sudo apt-get install {' '.join(self.packages)}"
        return text


def decide(returncode: int | None, output: str, env: Mapping[str, str], ldd_output: str = "",
           waited_s: float = 0.0, timeout_s: float = PROBE_TIMEOUT_S) -> Verdict:
    """The verdict from what the child did (``returncode`` None: it timed out) and, after a
    failure, ldd's report on the platform plugin."""
    m = re.search(r"^platform=(\S+)", output, re.MULTILINE)
    if returncode == 0 and m:
        return Verdict(True, m.group(1), waited_s=waited_s)
    platform = failed_platform(output, env)
    missing = list(dict.fromkeys(missing_from_ldd(ldd_output) + missing_from_output(output)))
    reasons: list[str] = []
    if missing:
        reasons.append("these libraries are not installed: " + ", ".join(missing))
    if _NO_PLUGIN.search(output):
        avail = _AVAILABLE.search(output)
        reasons.append(f"Qt has no platform plugin named '{platform}'"
                       + (f" (QT_QPA_PLATFORM={env.get('QT_QPA_PLATFORM')})" if env.get("QT_QPA_PLATFORM") else "")
                       + (f"; available: {avail.group(1)}" if avail else ""))
    if "could not connect to display" in output:
        shown = env.get("DISPLAY")
        reasons.append(f"no X display could be opened (DISPLAY={shown})" if shown else
                       "no X display could be opened (DISPLAY is not set)")
    if "Failed to create wl_display" in output:
        reasons.append(f"no Wayland display could be opened (WAYLAND_DISPLAY={env.get('WAYLAND_DISPLAY', '')})")
    if returncode is None:
        reasons.append(f"Qt did not start within {timeout_s:g} s (is the display answering?)")
    if not reasons:
        lines = [ln.strip() for ln in output.splitlines() if ln.strip() and not ln.startswith(("  ", "Traceback"))]
        qt = [ln for ln in lines if ln.startswith("qt.")]
        said = (qt or lines or [""])[0] if qt else (lines[-1] if lines else "")
        reasons.append(f"Qt stopped (exit code {returncode})" + (f": {said}" if said else ""))
    packages = tuple(dict.fromkeys(p for p in (package_for(lib) for lib in missing) if p))
    unknown = [lib for lib in missing if package_for(lib) is None]
    if unknown:
        reasons.append("find the package of " + ", ".join(unknown) + " with: apt-file search NAME")
    return Verdict(False, platform, tuple(reasons), tuple(missing), packages, waited_s, output)


class Probe:
    """The child process, started at construction; ``verdict()`` waits for it (bounded)."""

    def __init__(self, env: Mapping[str, str] | None = None, python: str = sys.executable,
                 timeout_s: float = PROBE_TIMEOUT_S, popen: Callable[..., subprocess.Popen] = subprocess.Popen,
                 ldd: Callable[[Path], str] = run_ldd) -> None:
        self.env = dict(os.environ if env is None else env)
        self.timeout_s = timeout_s
        self._ldd = ldd
        self._t0 = time.perf_counter()
        self._proc = popen([python, "-c", PROBE_CODE], env=self.env, stdin=subprocess.DEVNULL,
                           stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)

    def verdict(self) -> Verdict:
        asked = time.perf_counter()
        try:
            output, _ = self._proc.communicate(timeout=max(0.0, self.timeout_s - (time.perf_counter() - self._t0)))
            code: int | None = self._proc.returncode
        except subprocess.TimeoutExpired:
            self._proc.kill()
            output, _ = self._proc.communicate()
            code = None
        waited = time.perf_counter() - asked
        ldd_output = ""
        if code != 0:
            plugin = plugin_file(failed_platform(output or "", self.env), self.env)
            if plugin is not None:
                ldd_output = self._ldd(plugin)
        return decide(code, output or "", self.env, ldd_output, waited, self.timeout_s)
