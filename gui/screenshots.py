"""Make the viewer screenshots of ``gui/README.md`` again (``assets/screenshots/``).

``python -m retina_viewer.screenshots assets/screenshots --force`` opens the window on the bundled
demo scenario in quick settings (as ``retina view`` does), sets each state from this script and
saves, atomically:

- ``viewer-window.png``: the whole window at heading 30 deg;
- ``viewer-head.png`` and ``viewer-map.png``: the head view and the map of that state, as rendered
  by OpenGL;
- ``viewer-scan.png``: a head scan (heading 300 deg, +/- 60 deg, 9 looks per sweep, one sweep)
  played to its end, the side panel scrolled down to the scan's numbers;
- ``viewer-ambiguous.png``: a horizontal field (inclination 0, declination 0), head level and
  facing north, where heading and heading + 180 deg give one pattern;
- ``viewer-locked-scale.png``: the colour scale locked at heading 0, then kappa lowered to 2;
- with ``--rf`` also ``viewer-rf.png``: RF on, a 1.2 MHz, 500 nT tone perpendicular to the field
  (minutes of computing for the demo pair on a small machine, unless the RF cache has it), the
  side panel scrolled down to the RF box.

Without a screen it starts its own Xvfb server (:mod:`retina_viewer.display`).  An existing file is
replaced only with ``--force``.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

__all__ = ["make_screenshots", "main"]

#: Window size of the screenshots, pixels.
WINDOW_SIZE = (1560, 900)


def _pump(app, seconds: float) -> None:
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        app.processEvents()
        time.sleep(0.005)


def _wait_drawn(app, win, *, timeout: float = 120.0, settle: float = 0.8) -> None:
    """Run the event loop until the newest result has the state's pose and both views drew it."""
    st = win.state
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        res = st.result
        if res is not None and abs(res.request.yaw_deg - st.yaw_deg) < 1e-9 and win._scan is None:
            marks = (win.head_view.draws, win.map_view.draws)
            _pump(app, settle)
            if st.result is res and (win.head_view.draws, win.map_view.draws) >= marks:
                return
        else:
            _pump(app, 0.05)
    raise TimeoutError("the viewer did not draw the state in time")


def make_screenshots(out_dir, *, force: bool = False, rf: bool = False,
                     log=print) -> list[Path]:
    """Open the window, set each state and save its screenshot (module docstring).

    Parameters
    ----------
    out_dir : str or pathlib.Path
        Folder for the PNG files (it must exist).
    force : bool, optional
        Replace existing files.
    rf : bool, optional
        Also make ``viewer-rf.png`` (slow: the RF yield function of the demo pair).
    log : callable, optional
        Called with one line per file written.

    Returns
    -------
    list of pathlib.Path
        The files written.
    """
    from PyQt6.QtWidgets import QApplication

    from .views import ensure_backend
    from .window import MainWindow, check_platform, load_start_scenario

    out = Path(out_dir)
    app = QApplication.instance() or QApplication(["retina-screenshots"])
    check_platform(app)
    ensure_backend()
    win = MainWindow(load_start_scenario(None, quick=None))
    win.resize(*WINDOW_SIZE)
    win.show()
    st = win.state
    written = []

    def shot(name, *, view=None):
        path = out / name
        if view is None:
            win.save_screenshot(path, force=force)
        else:
            win.save_view_image(view, path, force=force)
        written.append(path)
        log(f"wrote {path}")

    try:
        base = {k: st.get(k) for k in ("yaw_deg", "inclination_deg", "declination_deg")}
        _wait_drawn(app, win)
        st.update(yaw_deg=30.0)
        _wait_drawn(app, win)
        shot("viewer-window.png")
        shot("viewer-head.png", view="head")
        shot("viewer-map.png", view="map")

        if rf:
            st.update(rf_MHz=1.2, rf_nT=500.0, rf_direction="perpendicular", rf="tone")
            end = time.monotonic() + 1800.0
            while time.monotonic() < end:
                res = st.result
                if res is not None and res.request.rf is not None:
                    break
                _pump(app, 0.2)
            else:
                raise TimeoutError("the RF pattern was not computed in time")
            _wait_drawn(app, win)
            bar = win.side_scroll.verticalScrollBar()
            bar.setValue(bar.maximum())       # the RF box, at the bottom of the side panel
            _pump(app, 0.3)
            shot("viewer-rf.png")
            bar.setValue(0)
            st.update(rf="off")


        st.update(yaw_deg=300.0, scan_amplitude_deg=60.0, scan_steps=9, scan_repeats=1,
                  scan_speed_deg_s=240.0)
        _wait_drawn(app, win)
        win.play_scan()
        end = time.monotonic() + 120.0
        while win._scan is not None and time.monotonic() < end:
            _pump(app, 0.05)
        _wait_drawn(app, win)
        bar = win.side_scroll.verticalScrollBar()
        bar.setValue(bar.maximum())
        _pump(app, 0.3)
        shot("viewer-scan.png")
        bar.setValue(0)

        st.update(yaw_deg=0.0, inclination_deg=0.0, declination_deg=0.0)
        _wait_drawn(app, win)
        shot("viewer-ambiguous.png")

        st.update(**base)
        st.update(yaw_deg=0.0)
        _wait_drawn(app, win)
        st.update(lock_scale=True)
        _wait_drawn(app, win)
        st.update(kappa=2.0)
        _wait_drawn(app, win)
        shot("viewer-locked-scale.png")

    finally:
        win.close()
        app.processEvents()
    return written


def main(argv=None) -> int:
    """Command line: ``python -m retina_viewer.screenshots OUT_DIR [--force] [--rf]``.

    Parameters
    ----------
    argv : list of str, optional
        Arguments (default: ``sys.argv[1:]``).

    Returns
    -------
    int
        Exit status: 0, or 2 for bad input (an existing file without ``--force``, a missing
        folder, no display).
    """
    from retina.errors import InputError

    from .display import XvfbError, virtual_display

    ap = argparse.ArgumentParser(prog="python -m retina_viewer.screenshots",
                                 description="Make the viewer screenshots of gui/README.md again.")
    ap.add_argument("out_dir", help="folder for the PNG files (assets/screenshots)")
    ap.add_argument("--force", action="store_true", help="replace existing files")
    ap.add_argument("--rf", action="store_true", help="also viewer-rf.png (minutes of computing)")
    args = ap.parse_args(argv)
    if not Path(args.out_dir).is_dir():
        print(f"screenshots: error: {args.out_dir}: expected an existing folder", file=sys.stderr)
        return 2
    try:
        with virtual_display():
            make_screenshots(args.out_dir, force=args.force, rf=args.rf)
    except (InputError, XvfbError) as exc:
        print(f"screenshots: error: {' '.join(str(exc).split())}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
