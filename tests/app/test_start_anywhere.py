"""Start anywhere: a computer that cannot show the window gets one line, and the real X11 platform runs.

The other app tests run Qt's offscreen platform, which hides missing system
libraries; the last test here starts `fieldmark app` on the real xcb platform under
Xvfb and drives it with real key presses (xdotool).
"""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time

import pytest

from observer_app.ui import system_libraries
from tests.app.conftest import make_study
from tests.conftest import ROOT, assert_user_error, call_cli

MISSING = {"libxcb-cursor.so.0", "libxcb-icccm.so.4", "libxcb-keysyms.so.1"}  # a fresh desktop image lacks these


def fresh_image_loader(soname: str) -> None:
    if soname in MISSING:
        raise OSError(f"{soname}: cannot open shared object file: No such file or directory")


def test_missing_system_libraries_are_named_with_the_packages_to_install(tmp_path, monkeypatch):
    folder = make_study(tmp_path / "study")
    monkeypatch.setattr(system_libraries, "load_library", fresh_image_loader)
    monkeypatch.setenv("QT_QPA_PLATFORM", "xcb")
    monkeypatch.setenv("DISPLAY", ":4321")  # the libraries are checked first
    result = call_cli("app", folder)
    assert_user_error(result, "libxcb-cursor.so.0", "libxcb-icccm.so.4", "libxcb-keysyms.so.1",
                      "sudo apt-get install libxcb-cursor0 libxcb-icccm4 libxcb-keysyms1",
                      "sudo dnf install xcb-util-cursor xcb-util-wm xcb-util-keysyms")


def test_no_display_is_one_line_not_an_abort(tmp_path, monkeypatch):
    folder = make_study(tmp_path / "study")
    monkeypatch.setenv("QT_QPA_PLATFORM", "xcb")
    monkeypatch.delenv("DISPLAY", raising=False)
    assert_user_error(call_cli("app", folder), "DISPLAY", "xvfb-run")


def test_a_display_nobody_answers_on_is_one_line_not_an_abort(tmp_path, monkeypatch):
    folder = make_study(tmp_path / "study")
    monkeypatch.setenv("QT_QPA_PLATFORM", "xcb")
    monkeypatch.setenv("DISPLAY", ":4321")  # no X server listens on display 4321
    assert_user_error(call_cli("app", folder), "DISPLAY=:4321", "xvfb-run")


def test_the_check_only_applies_where_qt_uses_x11(monkeypatch):
    monkeypatch.setattr(system_libraries, "reachable", lambda display: True)
    assert system_libraries.display_problem({"QT_QPA_PLATFORM": "offscreen"}, "linux", fresh_image_loader) is None
    assert system_libraries.display_problem({"DISPLAY": ":0"}, "darwin", fresh_image_loader) is None
    line = system_libraries.display_problem({"DISPLAY": ":0"}, "linux", fresh_image_loader)
    assert line is not None and "libxcb-cursor0" in line
    assert system_libraries.display_problem({"DISPLAY": ":0"}, "linux", lambda soname: None) is None


def test_the_app_runs_on_the_real_x11_platform_under_xvfb(tmp_path):
    tools = [shutil.which(name) for name in ("xvfb-run", "xdotool")]
    if not all(tools):
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail("CI must run the app on a real X server: install xvfb and xdotool (see .ci/run)")
        pytest.skip("xvfb-run or xdotool not installed (outside CI only)")
    folder = make_study(tmp_path / "study")
    driver = tmp_path / "drive.sh"
    # Start the app, wait for its window, press F6 (discreet) and F6 again, then Ctrl+Q.
    driver.write_text(f"""
set -u
"{sys.executable}" -m observer_app app "{folder}" --device xvfb-laptop &
app=$!
for attempt in $(seq 1 100); do
  id=$(xdotool search --name '^fieldmark' 2>/dev/null | head -n 1)
  [ -n "$id" ] && break
  kill -0 $app 2>/dev/null || break
  sleep 0.2
done
[ -n "${{id:-}}" ] || {{ echo "no window appeared" >&2; kill $app 2>/dev/null; exit 9; }}
xdotool windowactivate --sync "$id" 2>/dev/null || xdotool windowfocus --sync "$id"
sleep 0.5
xdotool key --window "$id" F6 F6
sleep 0.3
xdotool key --window "$id" ctrl+q
wait $app
""", encoding="utf-8")
    env = {key: value for key, value in os.environ.items() if key not in ("DISPLAY", "WAYLAND_DISPLAY")}
    env.update(QT_QPA_PLATFORM="xcb", PYTHONPATH=str(ROOT) + os.pathsep + env.get("PYTHONPATH", ""))
    started = time.monotonic()
    result = subprocess.run(["xvfb-run", "-a", "-s", "-screen 0 1280x800x24", "bash", str(driver)],
                            capture_output=True, text=True, env=env, timeout=120)
    assert result.returncode == 0, (result.returncode, result.stderr[-2000:])
    assert "Traceback" not in result.stderr and "qt.qpa.plugin" not in result.stderr, result.stderr
    assert time.monotonic() - started < 100
