"""A vispy canvas drawn into an off-screen framebuffer and shown as an image in a plain QWidget.

Why
---
vispy's Qt backend puts each canvas in a ``QOpenGLWidget``.  A window holding one is composited
by OpenGL as a whole: every repaint of anything in it (a slider moving, a label changing, one
canvas) redraws and swaps the *whole window* through the OpenGL driver.  On Mesa's software
renderer under a virtual X server that costs tens of milliseconds per frame, whatever changed
(``benchmarks/bench_viewer.py`` measures it as "empty frame of the window").  Here each canvas
renders its scene with its own OpenGL context into a framebuffer object of the widget's size,
reads the pixels back (:meth:`QOpenGLFramebufferObject.toImage`) and paints them as an image, so
the window stays an ordinary raster window: a slider's repaint costs what a slider costs, and a
canvas's repaint costs its own scene, the read-back and a copy of its own pixels.  On a GPU the
read-back is a small price; the viewer is built for both.

Contract (owned here)
---------------------
- :func:`scene_canvas` returns a :class:`vispy.scene.SceneCanvas` whose ``native`` widget is an
  :class:`OffscreenCanvasBackend` (a ``QWidget``): mouse, wheel and key events, ``update()``,
  ``render()`` and the ``draw`` and ``resize`` events behave as with vispy's own Qt backend.
- One OpenGL context per canvas (``QOpenGLContext`` on a ``QOffscreenSurface``); the scene is drawn
  when Qt paints the widget (one draw per ``update()``, coalesced by Qt as usual).
- The widget is opaque (``WA_OpaquePaintEvent``): nothing behind it is painted.
- One canvas per paint pass: Qt paints every widget of a window that asked for it in one pass of
  the event loop, so two canvases changed together would keep the loop busy for both scenes at
  once.  A canvas asked to redraw while another canvas of its window still waits for its paint
  asks again 1 ms later, after that paint: the event loop runs in between (input, timers), and
  its longest stall is one scene, not two.  Each canvas still draws once per change.
- Making a canvas installs :class:`_ShaderParseRe` in ``vispy.gloo.program``: vispy's
  comment stripping of shader code without its backtracking regular expression (the same text,
  :func:`strip_line_comments`; about a second of CPU at start-up for the viewer's shaders).
"""

from __future__ import annotations

import time

__all__ = ["scene_canvas", "OffscreenCanvasBackend", "offscreen_app", "strip_line_comments"]

_APP = None
_CLASS = None
#: Canvases whose paint Qt has been asked for and has not done yet, with the time of asking.
_PENDING: dict = {}
#: A paint still not done after this long (seconds) no longer holds other canvases back.
_PENDING_MAX_S = 0.25


def _other_pending(canvas) -> bool:
    """Whether another visible canvas of ``canvas``'s window waits for its paint."""
    now = time.monotonic()
    win = canvas.window()
    for c, t in list(_PENDING.items()):
        if c is canvas:
            continue
        try:
            alive = now - t < _PENDING_MAX_S and c.isVisible()
            same = alive and c.window() is win
        except RuntimeError:  # deleted
            alive = same = False
        if not alive:
            _PENDING.pop(c, None)
        elif same:
            return True
    return False


def _backend_class():
    """The backend class (built on first use: it imports Qt and vispy's Qt backend)."""
    global _CLASS
    if _CLASS is None:
        _CLASS = _make_backend_class()
    return _CLASS


def _make_backend_class():
    from PyQt6.QtCore import Qt, QTimer
    from PyQt6.QtGui import QOffscreenSurface, QOpenGLContext, QPainter, QSurfaceFormat
    from PyQt6.QtOpenGL import QOpenGLFramebufferObject, QOpenGLFramebufferObjectFormat
    from PyQt6.QtWidgets import QWidget
    from vispy.app.backends import _qt

    class OffscreenCanvasBackend(_qt.QtBaseCanvasBackend, QWidget):
        """vispy canvas backend: a QWidget showing an image of the scene drawn off screen."""

        def _init_specific(self, p, kwargs):
            QWidget.__init__(self, p.parent, Qt.WindowType.Widget)
            cfg = p.context.config
            fmt = QSurfaceFormat()
            fmt.setRedBufferSize(cfg["red_size"])
            fmt.setGreenBufferSize(cfg["green_size"])
            fmt.setBlueBufferSize(cfg["blue_size"])
            fmt.setAlphaBufferSize(cfg["alpha_size"])
            fmt.setDepthBufferSize(cfg["depth_size"] or 0)
            fmt.setStencilBufferSize(cfg["stencil_size"] or 0)
            self._ctx = QOpenGLContext()
            self._ctx.setFormat(fmt)
            if not self._ctx.create():
                raise RuntimeError("could not create an OpenGL context")
            self._surface = QOffscreenSurface()
            self._surface.setFormat(self._ctx.format())
            self._surface.create()
            self._fbo = None
            self._resize_pending = False
            self._deferred = False
            self._gl_initialized = False
            self._image = None
            self.setAttribute(Qt.WidgetAttribute.WA_OpaquePaintEvent, True)
            self.setAttribute(Qt.WidgetAttribute.WA_NoSystemBackground, True)
            self.setFocusPolicy(Qt.FocusPolicy.WheelFocus)
            self._initialized = True

        # ------------------------------------------------------------ GL plumbing
        def _make_current(self) -> bool:
            return bool(self._ctx.makeCurrent(self._surface))

        def _ensure_fbo(self):
            w, h = (max(int(x), 1) for x in self._physical_size)
            if self._fbo is None or (self._fbo.width(), self._fbo.height()) != (w, h):
                ff = QOpenGLFramebufferObjectFormat()
                ff.setAttachment(QOpenGLFramebufferObject.Attachment.CombinedDepthStencil)
                self._fbo = QOpenGLFramebufferObject(w, h, ff)
            return self._fbo

        def _vispy_set_current(self):
            if self._vispy_canvas is None:
                return
            if self._make_current():
                self._ensure_fbo().bind()

        def _vispy_swap_buffers(self):
            pass  # nothing to swap: the image is painted by paintEvent

        def _vispy_get_fb_bind_location(self):
            return self._fbo.handle() if self._fbo is not None else 0

        def _vispy_close(self):
            if self._make_current():
                self._fbo = None
                self._ctx.doneCurrent()
            self.close()

        def _vispy_update(self):
            if self._vispy_canvas is None:
                return
            if self.isVisible() and _other_pending(self):
                # one canvas per paint pass (module docstring): ask again after that paint
                if not self._deferred:
                    self._deferred = True
                    QTimer.singleShot(1, self._retry_update)
                return
            if self.isVisible():
                _PENDING[self] = time.monotonic()
            self.update()

        def _retry_update(self):
            self._deferred = False
            try:
                self._vispy_update()
            except RuntimeError:  # the widget was deleted meanwhile
                _PENDING.pop(self, None)

        # ------------------------------------------------------------ Qt events
        def resizeEvent(self, event):  # noqa: N802 - Qt name
            # as QOpenGLWidget does: vispy hears of the new size just before the next draw, once
            # the window's layout has settled
            self._resize_pending = True

        def _apply_resize(self):
            self._resize_pending = False
            ratio = self.devicePixelRatioF()
            w, h = self.width(), self.height()
            self._vispy_set_physical_size(int(w * ratio), int(h * ratio))
            self._vispy_canvas.events.resize(size=(w, h), physical_size=self._physical_size)

        def render_image(self):
            """Draw the scene into the framebuffer and return it as a QImage (None if no GL)."""
            canvas = self._vispy_canvas
            if canvas is None or not self._make_current():
                return None
            if self._resize_pending:
                self._apply_resize()
            fbo = self._ensure_fbo()
            fbo.bind()
            if not self._gl_initialized:
                self._gl_initialized = True
                canvas.events.initialize()
            canvas.set_current()
            canvas.events.draw(region=None)
            canvas.context.flush()  # glFlush; toImage waits for the pixels
            return fbo.toImage(True)

        def paintEvent(self, event):  # noqa: N802 - Qt name
            _PENDING.pop(self, None)
            try:
                img = self.render_image()
            except Exception:  # noqa: BLE001 - nothing may escape a Qt event handler
                import logging

                logging.getLogger("retina").exception("drawing a view failed")
                img = None
            if img is None:
                return
            self._image = img
            p = QPainter(self)
            p.drawImage(0, 0, img)
            p.end()

    return OffscreenCanvasBackend


def strip_line_comments(code: str) -> str:
    """``code`` with every line cut at its last ``//``: what vispy's shader parser does with
    ``re.sub(r'(.*)(//.*)', r'\1', code, flags=re.M)`` (the greedy group keeps everything
    before the last ``//`` of a line), without the regular expression's backtracking.

    Parameters
    ----------
    code : str
        GLSL source.

    Returns
    -------
    str
    """
    return "\n".join(ln[:ln.rfind("//")] if "//" in ln else ln for ln in code.split("\n"))


class _ShaderParseRe:
    """Stands in for the ``re`` module inside ``vispy.gloo.program``: its comment-stripping
    substitution (a backtracking regular expression, milliseconds per shader, tens of shaders at
    start-up) goes to :func:`strip_line_comments`; any other call goes to ``re`` itself."""

    def __getattr__(self, name):
        import re

        return getattr(re, name)

    @staticmethod
    def sub(pattern, repl, string, count=0, flags=0):
        import re

        if pattern == r"(.*)(//.*)" and repl == r"\1" and count == 0 and flags == re.M:
            return strip_line_comments(string)
        return re.sub(pattern, repl, string, count=count, flags=flags)


def _fast_shader_parsing() -> None:
    """Install :class:`_ShaderParseRe` in ``vispy.gloo.program`` (idempotent)."""
    from vispy.gloo import program

    if not isinstance(getattr(program, "re", None), _ShaderParseRe):
        program.re = _ShaderParseRe()


def offscreen_app():
    """A vispy Application on PyQt6 whose canvases use :class:`OffscreenCanvasBackend`."""
    global _APP
    _fast_shader_parsing()
    if _APP is None:
        import vispy.app
        from vispy.app import Application

        vispy.app.use_app("pyqt6")
        base = vispy.app.use_app()
        cls = _backend_class()

        class _Module:
            """The PyQt6 backend module with the canvas class replaced."""

            def __getattr__(self, name):
                return getattr(base.backend_module, name)

            CanvasBackend = cls

        class _App(Application):
            def __init__(self):
                self._backend_module = base.backend_module
                self._backend = base._backend

            @property
            def backend_module(self):
                return _Module()

        _APP = _App()
    return _APP


def scene_canvas(**kwargs):
    """A :class:`vispy.scene.SceneCanvas` drawn off screen (module docstring); keyword arguments
    as for ``SceneCanvas`` (``app`` and ``autoswap`` are set here).

    ``RETINA_VIEWER_CANVAS=widget`` in the environment gives vispy's own ``QOpenGLWidget`` canvas
    instead (for comparison, or where reading pixels back is slow).
    """
    import os

    from vispy import scene

    _fast_shader_parsing()
    if os.environ.get("RETINA_VIEWER_CANVAS", "").strip().lower() == "widget":
        # Qt composites and swaps the window itself; vispy's swap would swap it a second time
        return scene.SceneCanvas(autoswap=False, **kwargs)
    return scene.SceneCanvas(app=offscreen_app(), autoswap=False, **kwargs)


def __getattr__(name):
    if name == "OffscreenCanvasBackend":
        return _backend_class()
    raise AttributeError(name)
