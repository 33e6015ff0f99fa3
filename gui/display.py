"""A private virtual X server (Xvfb) for the viewer where there is no screen: tests, benchmarks,
screenshots on a server or in CI.

:func:`virtual_display` uses the display there is (``DISPLAY`` or ``WAYLAND_DISPLAY`` set, or a
platform other than Linux) and otherwise starts ``Xvfb -displayfd`` (the server picks a free
display number and writes it to a pipe, so two runs never collide), sets ``DISPLAY`` while inside
and stops the server at the end.  Imports nothing from Qt or vispy.
"""

from __future__ import annotations

import contextlib
import os
import select
import shutil
import subprocess
import sys
import time

__all__ = ["XvfbError", "start_xvfb", "virtual_display", "SCREEN"]

#: Screen of the virtual server: width x height x depth.
SCREEN = "1600x1000x24"


class XvfbError(RuntimeError):
    """No virtual X server could be started (with the reason)."""


def start_xvfb(screen: str = SCREEN, *, timeout: float = 20.0):
    """Start ``Xvfb`` on a free display number.

    Parameters
    ----------
    screen : str, optional
        The screen as ``"WIDTHxHEIGHTxDEPTH"`` (pixels, bits per pixel), default :data:`SCREEN`.
    timeout : float, optional
        Seconds to wait for the server to report its display.

    Returns
    -------
    proc : subprocess.Popen
        The server (stop it with ``terminate()``).
    display : str
        Its display name, e.g. ``":1"``.

    Raises
    ------
    XvfbError
        Xvfb is not installed, or it did not report a display within ``timeout`` seconds.
    """
    xvfb = shutil.which("Xvfb")
    if xvfb is None:
        raise XvfbError("Xvfb is not installed (apt-get install xvfb)")
    r, w = os.pipe()
    try:
        proc = subprocess.Popen([xvfb, "-displayfd", str(w), "-screen", "0", screen, "-nolisten", "tcp"],
                                pass_fds=(w,), stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    finally:
        os.close(w)
    num = b""
    end = time.monotonic() + timeout
    try:
        while not num.endswith(b"\n"):
            left = end - time.monotonic()
            if left <= 0 or not select.select([r], [], [], left)[0]:
                break
            chunk = os.read(r, 16)
            if not chunk:
                break
            num += chunk
    finally:
        os.close(r)
    if not num.strip():
        proc.kill()
        proc.wait(10)
        raise XvfbError(f"Xvfb did not report a display within {timeout:g} s")
    return proc, ":" + num.decode().strip()


@contextlib.contextmanager
def virtual_display(screen: str = SCREEN, *, timeout: float = 20.0):
    """The display to use: the existing one, else a private Xvfb server (module docstring).

    Parameters
    ----------
    screen : str, optional
        The screen of a server started here, ``"WIDTHxHEIGHTxDEPTH"`` (pixels, bits per pixel).
    timeout : float, optional
        Seconds to wait for a started server to report its display.

    Yields
    ------
    str or None
        The ``DISPLAY`` in use (None on a platform without X).

    Raises
    ------
    XvfbError
        No display and no Xvfb could be started.
    """
    if sys.platform != "linux" or os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY"):
        yield os.environ.get("DISPLAY")
        return
    proc, display = start_xvfb(screen, timeout=timeout)
    os.environ["DISPLAY"] = display
    try:
        yield display
    finally:
        if os.environ.get("DISPLAY") == display:
            os.environ.pop("DISPLAY", None)
        proc.terminate()
        try:
            proc.wait(10)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait(10)
