"""Whether this computer can show the app's window, asked before Qt is started.

Why: on Linux, Qt's X11 platform plugin needs system libraries that a fresh desktop
image may lack; Qt then aborts the process (exit 134) naming only the first one.  We
try each library the plugin links against (no Qt needed, only the dynamic loader) and
turn the missing ones into one line with the packages to install, Debian/Ubuntu and
Fedora names side by side.  No Qt is imported here.
"""
from __future__ import annotations

import ctypes
import socket
import sys
from collections.abc import Callable, Mapping

# soname the X11 platform plugin (libqxcb.so, Qt 6) links against -> (Debian/Ubuntu package, Fedora package).
# Found with `ldd` on PySide6 6.12's libqxcb.so and libQt6XcbQpa.so.6; package names from
# Debian 12 (`dpkg -S`) and, for Fedora, from memory.
XCB_LIBRARIES: dict[str, tuple[str, str]] = {
    "libxcb-cursor.so.0": ("libxcb-cursor0", "xcb-util-cursor"),
    "libxcb-icccm.so.4": ("libxcb-icccm4", "xcb-util-wm"),
    "libxcb-keysyms.so.1": ("libxcb-keysyms1", "xcb-util-keysyms"),
    "libxcb-image.so.0": ("libxcb-image0", "xcb-util-image"),
    "libxcb-render-util.so.0": ("libxcb-render-util0", "xcb-util-renderutil"),
    "libxcb-util.so.1": ("libxcb-util1", "xcb-util"),
    "libxcb-xkb.so.1": ("libxcb-xkb1", "libxcb"),
    "libxcb-shape.so.0": ("libxcb-shape0", "libxcb"),
    "libxcb-randr.so.0": ("libxcb-randr0", "libxcb"),
    "libxcb.so.1": ("libxcb1", "libxcb"),
    "libX11-xcb.so.1": ("libx11-xcb1", "libX11-xcb"),
    "libxkbcommon.so.0": ("libxkbcommon0", "libxkbcommon"),
    "libxkbcommon-x11.so.0": ("libxkbcommon-x11-0", "libxkbcommon-x11"),
    "libEGL.so.1": ("libegl1", "libglvnd-egl"),
    "libGL.so.1": ("libgl1", "libglvnd-glx"),
    "libfontconfig.so.1": ("libfontconfig1", "fontconfig"),
    "libdbus-1.so.3": ("libdbus-1-3", "dbus-libs"),
}


def load_library(soname: str) -> None:
    """Load one shared library by its soname; OSError when the loader cannot find it."""
    ctypes.CDLL(soname)


def uses_x11(environ: Mapping[str, str]) -> bool:
    """Whether Qt will pick its X11 (xcb) platform plugin in this environment."""
    chosen = environ.get("QT_QPA_PLATFORM", "").split(";")[0].split(":")[0].strip().lower()
    if chosen:
        return chosen == "xcb"
    return not (environ.get("WAYLAND_DISPLAY") and environ.get("XDG_SESSION_TYPE") == "wayland")


def missing_libraries(load: Callable[[str], None] | None = None) -> list[str]:
    """The sonames in XCB_LIBRARIES that ``load`` (default ``load_library``) cannot load, in table order."""
    load = load or load_library
    missing = []
    for soname in XCB_LIBRARIES:
        try:
            load(soname)
        except OSError:
            missing.append(soname)
    return missing


def display_problem(environ: Mapping[str, str], platform: str = sys.platform,
                    load: Callable[[str], None] | None = None) -> str | None:
    """One line saying why the window cannot open and what to do, or None when it can."""
    if not platform.startswith("linux") or not uses_x11(environ):
        return None
    missing = missing_libraries(load)
    if missing:
        debian = " ".join(dict.fromkeys(XCB_LIBRARIES[soname][0] for soname in missing))
        fedora = " ".join(dict.fromkeys(XCB_LIBRARIES[soname][1] for soname in missing))
        return (f"the app's window needs system libraries this computer lacks ({', '.join(missing)}); "
                f"install them with `sudo apt-get install {debian}` (Debian/Ubuntu) or "
                f"`sudo dnf install {fedora}` (Fedora), then start the app again")
    display = environ.get("DISPLAY", "")
    if not display:
        return ("no display to open the app's window on (DISPLAY is not set); start it from a desktop session, "
                "or under a virtual display with `xvfb-run fieldmark app STUDY`")
    if not reachable(display):
        return (f"cannot reach the display DISPLAY={display} (no X server answers there); start the app from a "
                "desktop session, or under a virtual display with `xvfb-run fieldmark app STUDY`")
    return None


def reachable(display: str, timeout: float = 2.0) -> bool:
    """Whether an X server listens at ``display`` (":1", "unix:1", "host:1.0"); True when unsure.

    Qt aborts the process when it cannot connect, and then blames a missing library.
    """
    host, _, number = display.rpartition(":")
    number = number.split(".")[0]
    if not number.isdigit():
        return True  # a form we do not know: let Qt try
    if host in ("", "unix"):
        addresses = [(socket.AF_UNIX, f"/tmp/.X11-unix/X{number}"), (socket.AF_UNIX, f"\0/tmp/.X11-unix/X{number}")]
    elif "/" in host:
        return True  # a launchd or similar socket path: let Qt try
    else:
        addresses = [(socket.AF_INET, (host, 6000 + int(number)))]
    for family, address in addresses:
        try:
            with socket.socket(family, socket.SOCK_STREAM) as connection:
                connection.settimeout(timeout)
                connection.connect(address)
                return True
        except OSError:
            continue
    return False
