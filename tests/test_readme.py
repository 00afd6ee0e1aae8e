"""The README's set-up promises: the apt list for the window is complete, the two commands are there.

The Qt runtime packages that ``.ci/run`` installs for the window (its "Qt offscreen and xcb"
group, minus the X server used only by tests) must all be in the README's apt line: a lab
that follows the README must not meet Qt's abort for a missing xcb library.
"""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TEST_ONLY = {"xvfb", "xauth"}


def _ci_qt_packages() -> set[str]:
    text = (ROOT / ".ci" / "run").read_text()
    block = text.split("# Qt offscreen and xcb under Xvfb", 1)[1].split("#", 1)[0]
    return set(block.split()) - TEST_ONLY


def _readme_apt_packages() -> set[str]:
    text = (ROOT / "README.md").read_text()
    block = re.search(r"apt-get install ([^`]*?)\n```", text, re.S)
    assert block, "no apt-get install block in the README"
    return set(block.group(1).replace("\\", " ").split())


def test_the_readme_lists_every_qt_package_ci_installs():
    ci = _ci_qt_packages()
    assert "libxcb-icccm4" in ci and "libxcb-keysyms1" in ci     # the two that were missing
    assert ci <= _readme_apt_packages(), ci - _readme_apt_packages()


def test_the_readme_gives_the_two_set_up_commands():
    text = (ROOT / "README.md").read_text()
    assert 'python3 -m pip install -e . && flamebode' in text
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest' in text
    assert 'python3 -m pip install -e ".[test]" && python3 -m pytest' in (ROOT / ".ci" / "run").read_text()
