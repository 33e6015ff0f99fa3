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
- One OpenGL context per canvas (``QOpenGLContext`` on a ``QOffscreenSurface``).
- Frames in batches (:data:`BATCH`, :class:`_FrameBatch`): ``update()`` on a shown canvas puts it
  in the batch; in the next pass of the event loop the batch issues every waiting canvas's scene
  (vispy's draw and ``glFlush``) and then reads each back, so Mesa's software renderer can
  rasterise one canvas while the GUI thread builds the next one's commands; Qt then paints the
  images in one paint pass.  One draw per ``update()`` (several ``update()`` calls before the
  batch runs are one draw).  A paint Qt asks for by itself (the widget shown, exposed, resized or
  grabbed) draws the scene at once and takes the canvas out of a waiting batch.  A hidden canvas
  draws when it is shown.
- The widget is opaque (``WA_OpaquePaintEvent``): nothing behind it is painted.  The image read
  back is shown as opaque RGB (``Format_RGB32``), its alpha channel ignored: Qt takes a
  framebuffer's pixels as premultiplied, and a channel above its alpha (a pixel blended by a
  visual that lowers the frame's alpha) would come out as a false colour.  The views keep the
  frame's alpha at 1 anyway (``retina_viewer.views``, text blending).
- Making a canvas installs :class:`_ShaderParseRe` in ``vispy.gloo.program``: vispy's
  comment stripping of shader code without its backtracking regular expression (the same text,
  :func:`strip_line_comments`; about a second of CPU at start-up for the viewer's shaders).
"""

from __future__ import annotations

import numpy as np

__all__ = ["scene_canvas", "OffscreenCanvasBackend", "offscreen_app", "strip_line_comments", "StaticLayer",
           "BATCH"]

_APP = None
_CLASS = None


class _FrameBatch:
    """The canvases that asked for a frame, drawn together in one pass of the event loop.

    :meth:`run` first issues every waiting canvas's scene (vispy's draw and ``glFlush``: Mesa's
    software renderer rasterises it on its own threads) and only then reads each one back, so the
    renderer can rasterise the first canvas while the GUI thread builds the next one's commands;
    Qt then paints all the images in one paint pass.  (Reading the scenes back in a later pass of
    the event loop, so that input runs in between, was measured too: no faster, and about 2 ms
    more GUI-thread CPU per step for the extra pass.)
    """

    def __init__(self):
        self.waiting: list = []
        self.scheduled = False
        #: Canvases drawn by :meth:`run` (and how many passes): counters for the benchmark.
        self.frames = 0
        self.passes = 0
        #: False: read each canvas back at once, before the next is drawn (for comparison).
        self.overlap = True

    def request(self, backend) -> None:
        from PyQt6.QtCore import QTimer

        if backend not in self.waiting:
            self.waiting.append(backend)
        if not self.scheduled:
            self.scheduled = True
            QTimer.singleShot(0, self.run)

    def discard(self, backend) -> None:
        """Take ``backend`` out of the batch (it draws by itself now)."""
        if backend in self.waiting:
            self.waiting.remove(backend)

    def run(self) -> None:
        """Issue every waiting canvas's scene, then read each back and ask Qt to paint it."""
        import logging

        self.scheduled = False
        batch, self.waiting = self.waiting, []  # a canvas asking again meanwhile: next pass
        issued = []
        for b in batch:
            try:
                if b.isVisible() and b._issue():
                    issued.append(b)
                    if not self.overlap:
                        b._collect()
            except RuntimeError:  # the widget was deleted meanwhile
                continue
            except Exception:  # noqa: BLE001 - nothing may escape a Qt slot
                logging.getLogger("retina").exception("drawing a view failed")
        for b in issued if self.overlap else ():
            try:
                b._collect()
            except RuntimeError:
                continue
            except Exception:  # noqa: BLE001 - nothing may escape a Qt slot
                logging.getLogger("retina").exception("reading a view back failed")
        self.frames += len(issued)
        self.passes += bool(issued)


#: The one frame batch of the process (all canvases run on the GUI thread).
BATCH = _FrameBatch()


def _backend_class():
    """The backend class (built on first use: it imports Qt and vispy's Qt backend)."""
    global _CLASS
    if _CLASS is None:
        _CLASS = _make_backend_class()
    return _CLASS


def _make_backend_class():
    from PyQt6.QtCore import Qt
    from PyQt6.QtGui import QImage, QOffscreenSurface, QOpenGLContext, QPainter, QSurfaceFormat
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
            self._gl_initialized = False
            self._image = None
            self._fresh = None   # an image read back by the batch, to paint
            self.painted = 0     # images painted into the window
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
            if self.isVisible():
                BATCH.request(self)  # drawn with the other canvases' frames (_FrameBatch)
            else:
                self.update()  # painted (and drawn) when shown

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

        def _issue(self) -> bool:
            """Draw the scene into the framebuffer and send it to the renderer (``glFlush``),
            without waiting for the pixels; False when there is no GL context."""
            canvas = self._vispy_canvas
            if canvas is None or not self._make_current():
                return False
            if self._resize_pending:
                self._apply_resize()
            fbo = self._ensure_fbo()
            fbo.bind()
            if not self._gl_initialized:
                self._gl_initialized = True
                canvas.events.initialize()
            canvas.set_current()
            canvas.events.draw(region=None)
            canvas.context.flush()  # glFlush: the renderer starts on it; toImage waits for the pixels
            return True

        def _read_back(self):
            """The framebuffer's pixels as a QImage (waits for the renderer)."""
            if not self._make_current() or self._fbo is None:
                return None
            img = self._fbo.toImage(True)
            # the frame is opaque (the views blend keeping alpha 1); Qt would take the alpha as
            # premultiplied coverage and composite with it: show the colours as they are
            if img.format() == QImage.Format.Format_ARGB32_Premultiplied:
                img.reinterpretAsFormat(QImage.Format.Format_RGB32)
            return img

        def _collect(self) -> None:
            """After :meth:`_issue` (in :class:`_FrameBatch`): read the pixels back and ask Qt to
            paint them."""
            img = self._read_back()
            if img is not None:
                self._image = self._fresh = img
                self.update()

        def render_image(self):
            """Draw the scene into the framebuffer and return it as a QImage (None if no GL)."""
            if not self._issue():
                return None
            return self._read_back()

        def paintEvent(self, event):  # noqa: N802 - Qt name
            img, self._fresh = self._fresh, None
            if img is None or self._resize_pending:
                # a paint Qt asked for itself (shown, exposed, resized, grabbed): draw now; a frame
                # waiting in the batch would be a second draw of the same scene
                BATCH.discard(self)
                try:
                    img = self.render_image()
                except Exception:  # noqa: BLE001 - nothing may escape a Qt event handler
                    import logging

                    logging.getLogger("retina").exception("drawing a view failed")
                    img = None
                if img is None:
                    return
                self._image = img
            self.painted += 1
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
    """A vispy Application on PyQt6 whose canvases use :class:`OffscreenCanvasBackend`.

    Returns
    -------
    vispy.app.Application
        One per process (made on the first call, then the same object).
    """
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

    Parameters
    ----------
    **kwargs
        Passed to :class:`vispy.scene.SceneCanvas` (e.g. ``size=(width, height)`` in logical
        pixels, ``bgcolor``, ``parent``, ``show``).

    Returns
    -------
    vispy.scene.SceneCanvas
        Its ``native`` is an :class:`OffscreenCanvasBackend` widget (a ``QOpenGLWidget`` with
        ``RETINA_VIEWER_CANVAS=widget``).
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


def _subtree(node):
    out, stack = [], [node]
    while stack:
        n = stack.pop()
        out.append(n)
        stack.extend(n.children)
    return out


class StaticLayer:
    """Draw the parts of a scene that do not change from frame to frame once, keep their pixels,
    and per frame copy those pixels back and draw only the rest.

    Installed on a :class:`vispy.scene.SceneCanvas` (it takes over the canvas's ``_draw_scene``).
    The scene is drawn in two passes: first every node except the subtrees of ``dynamic`` (the
    static layer), then those subtrees.  The static layer's pixels are read back after its pass
    into a framebuffer of its own (``glBlitFramebuffer``, a copy on the GL side); while nothing in
    it changes, a frame clears, copies those pixels back (the same bytes; a plain copy, which
    Mesa's software renderer does as a memory copy, where drawing them as a textured quad cost
    about 8 ms of CPU per frame at 600 x 770 pixels) and draws only the dynamic subtrees.
    Without ``glBlitFramebuffer`` (an OpenGL ES 2.0 driver) the layer turns itself off: every
    frame then draws both passes.  A frame therefore always composes static-then-dynamic,
    cached or not, so the pictures are the same either way; they equal the one-pass drawing of the
    scene wherever a dynamic node does not overlap a static node that one pass drew after it.

    The kept pixels are dropped (and the static pass drawn again) when any node of the static
    layer reports a change (its ``update`` event: new data, new ticks after a camera change of a
    linked axis, a new widget size), when the canvas is resized, when the frame's framebuffer,
    size, background or ``key`` differs (``canvas.render`` draws into a framebuffer of its own;
    the head view's camera turns), and on :meth:`invalidate`.
    Pixels are kept only after a second static pass with no change since the one before, so a
    layer that changes every frame (a zoom drag moving the axes) costs no read-back.

    Parameters
    ----------
    canvas : vispy.scene.SceneCanvas
    dynamic : sequence of vispy.scene.Node
        The subtrees drawn every frame.
    static : sequence of vispy.scene.Node
        The subtrees whose changes drop the kept pixels (every node outside ``dynamic`` is drawn in
        the static pass; container nodes such as widgets and view boxes, which draw nothing
        themselves here, are drawn in both passes).
    depth : bool
        Keep the depth (and stencil) buffer with the colours, for a 3-D scene whose dynamic part is
        depth-tested against the static one.  A framebuffer whose depth format differs from
        ``GL_DEPTH24_STENCIL8`` (OpenGL refuses the copy) is drawn in both passes.
    key : callable, optional
        Returns a value that changes whenever the static layer's picture does without an
        ``update`` event (a 3-D camera: its state); kept pixels are used only for the same value.

    Attributes
    ----------
    captures : int
        How many times the static layer's pixels were kept (copied after its pass).
    cached_frames : int
        How many frames were drawn from the kept pixels.
    """

    def __init__(self, canvas, dynamic, static, *, depth=False, key=None):
        self.canvas = canvas
        self.dynamic = list(dynamic)
        self.static = list(static)
        self.captures = 0
        self.cached_frames = 0
        self._fbo = self._fbo_size = None  # the kept pixels: a framebuffer of our own
        self._rbs = []
        self.depth = bool(depth)
        self._extra_key = key
        self._last_key = None     # the frame key of the previous static pass
        self._refused = set()     # frame keys whose framebuffer OpenGL would not copy
        self._key = None          # (width, height, background) of the kept pixels
        self._dirty = True        # the static layer changed since its last pass
        self._quiet = False       # our own drawing: its events are not changes
        self._enabled = True
        self._after_static = None
        for root in self.static:
            for n in _subtree(root):
                # (not transform_change: vispy emits it for every node whenever a frame is drawn
                # into another framebuffer, canvas.render; a new layout comes with a resize or an
                # update of the widget, a new axis range with an update of the axis)
                n.events.update.connect(self._changed)
        canvas.events.resize.connect(self._changed)
        canvas._draw_scene = self._draw_scene

    @property
    def enabled(self) -> bool:
        """Whether frames may be drawn from the kept pixels (False: the static pass every frame)."""
        return self._enabled

    @enabled.setter
    def enabled(self, value: bool) -> None:
        self._enabled = bool(value)
        self.invalidate()

    def invalidate(self, event=None) -> None:
        """Drop the kept pixels: the next frame draws the static layer again.

        Parameters
        ----------
        event : vispy.util.event.Event, optional
            The change event of a static node when called as its handler (not used).
        """
        self._dirty = True
        self._key = None

    def _changed(self, event=None):
        if not self._quiet:
            self.invalidate()

    # ------------------------------------------------------------------ drawing
    def _draw_nodes(self, skip):
        """vispy's ``SceneCanvas.draw_visual`` loop over the canvas's draw order, leaving out
        hidden subtrees and the subtrees whose roots are in ``skip``."""
        c = self.canvas
        scene = c.scene
        if scene not in c._draw_order:
            c._draw_order[scene] = c._generate_draw_order()
        off = None
        c._drawing = True
        try:
            for node, start in c._draw_order[scene]:
                if start:
                    if off is None:
                        if not node.visible or node in skip:
                            off = node
                        elif hasattr(node, "draw"):
                            node.draw()
                elif node is off:
                    off = None
        finally:
            c._drawing = False

    def _copy(self, w, h, to_cache: bool) -> bool:
        """Copy the pixels (colour, and with ``depth`` depth and stencil) between the framebuffer
        being drawn and the kept ones (``glBlitFramebuffer`` at the same size and format: a plain
        copy, no shading).  Returns False if OpenGL refused (formats that differ)."""
        from vispy.gloo import gl

        while gl.glGetError():
            pass
        current = int(gl.glGetParameter(gl.GL_FRAMEBUFFER_BINDING))
        src, dst = (current, self._fbo) if to_cache else (self._fbo, current)
        gl.glBindFramebuffer(_READ_FRAMEBUFFER, src)
        gl.glBindFramebuffer(_DRAW_FRAMEBUFFER, dst)
        mask = _COLOR_BUFFER_BIT | (_DEPTH_STENCIL_BITS if self.depth else 0)
        _blit_framebuffer()(0, 0, w, h, 0, 0, w, h, mask, _NEAREST)
        ok = gl.glGetError() == 0
        gl.glBindFramebuffer(gl.GL_FRAMEBUFFER, current)
        return ok

    def _capture(self, w, h, key):
        from vispy.gloo import gl

        if self._fbo is None or self._fbo_size != (w, h):
            self._release()
            current = int(gl.glGetParameter(gl.GL_FRAMEBUFFER_BINDING))
            self._fbo = gl.glCreateFramebuffer()
            gl.glBindFramebuffer(gl.GL_FRAMEBUFFER, self._fbo)
            self._rbs = []
            for fmt, attachment in ((_RGBA8, gl.GL_COLOR_ATTACHMENT0),) + (
                    ((_DEPTH24_STENCIL8, _DEPTH_STENCIL_ATTACHMENT),) if self.depth else ()):
                rb = gl.glCreateRenderbuffer()
                gl.glBindRenderbuffer(gl.GL_RENDERBUFFER, rb)
                gl.glRenderbufferStorage(gl.GL_RENDERBUFFER, fmt, w, h)
                gl.glFramebufferRenderbuffer(gl.GL_FRAMEBUFFER, attachment, gl.GL_RENDERBUFFER, rb)
                self._rbs.append(rb)
            gl.glBindFramebuffer(gl.GL_FRAMEBUFFER, current)
            self._fbo_size = (w, h)
        if self._copy(w, h, to_cache=True):
            self._key = key
            self.captures += 1
        else:  # this framebuffer's depth format differs from ours (canvas.render): not kept
            self._refused.add(key)

    def _release(self):
        from vispy.gloo import gl

        if self._fbo is not None:
            gl.glDeleteFramebuffer(self._fbo)
            for rb in self._rbs:
                gl.glDeleteRenderbuffer(rb)
        self._fbo = self._fbo_size = None
        self._rbs = []

    def _draw_scene(self, bgcolor=None):
        from vispy.gloo import gl

        c = self.canvas
        if bgcolor is None:
            bgcolor = c._bgcolor
        c.set_current()
        c.context.flush_commands()  # vispy queues its GL commands; ours run at once
        _, _, w, h = (int(v) for v in gl.glGetParameter(gl.GL_VIEWPORT))
        # the framebuffer itself is part of the key: kept pixels go back only where they came from
        # (canvas.render draws into a framebuffer of its own, whose formats may differ)
        key = (int(gl.glGetParameter(gl.GL_FRAMEBUFFER_BINDING)), w, h,
               tuple(np.asarray(getattr(bgcolor, "rgba", bgcolor), float).ravel()),
               None if self._extra_key is None else self._extra_key())
        self._quiet = True
        try:
            c.context.flush_commands()  # vispy's queued commands, before a copy
            if self._enabled and not self._dirty and self._key == key and self._copy(w, h, to_cache=False):
                # the copy replaced every pixel: no clear of the colours first (on Mesa's software
                # renderer a clear before the copy costs a rasterised pass of its own, which the
                # copy waits for); without kept depth, the depth (and stencil) buffer is cleared
                if not self.depth:
                    c.context.clear(color=False, depth=True)
                _set_gl_switches(self._after_static)  # as the static pass left them
                self.cached_frames += 1
            else:
                c.context.clear(color=bgcolor, depth=True)
                self._draw_nodes(skip=set(self.dynamic))
                self._after_static = _gl_switches()
                self._key = None
                if self._enabled and not self._dirty and key == self._last_key and key not in self._refused:
                    # unchanged since the previous static pass: keep its pixels
                    c.context.flush_commands()
                    try:
                        self._capture(w, h, key)
                    except RuntimeError:  # no glBlitFramebuffer: draw both passes every frame
                        self._enabled = False
                        self._key = None
                self._last_key = key
                self._dirty = False
            self._draw_nodes(skip=set(self.static))
        finally:
            self._quiet = False


_READ_FRAMEBUFFER, _DRAW_FRAMEBUFFER = 0x8CA8, 0x8CA9
_COLOR_BUFFER_BIT, _NEAREST, _RGBA8 = 0x4000, 0x2600, 0x8058
_DEPTH_STENCIL_BITS, _DEPTH24_STENCIL8, _DEPTH_STENCIL_ATTACHMENT = 0x0100 | 0x0400, 0x88F0, 0x821A
_BLIT = []


def _blit_framebuffer():
    """``glBlitFramebuffer`` of the OpenGL library vispy uses (OpenGL 3.0; not in vispy's ES 2.0
    subset), through ctypes."""
    if not _BLIT:
        import ctypes

        from vispy.gloo.gl import gl2

        fn = gl2._get_gl_func("glBlitFramebuffer", None, (ctypes.c_int,) * 8 + (ctypes.c_uint,) * 2)
        _BLIT.append(fn)
    return _BLIT[0]


_SWITCHES = ("GL_BLEND", "GL_DEPTH_TEST", "GL_CULL_FACE")


def _gl_switches():
    """The GL state a visual without its own state would inherit: blending (on, function),
    depth test (on, function, mask) and face culling."""
    from vispy.gloo import gl

    on = tuple(bool(gl.glIsEnabled(getattr(gl, n))) for n in _SWITCHES)
    ints = tuple(int(gl.glGetParameter(getattr(gl, n))) for n in (
        "GL_BLEND_SRC_RGB", "GL_BLEND_DST_RGB", "GL_BLEND_SRC_ALPHA", "GL_BLEND_DST_ALPHA",
        "GL_DEPTH_FUNC"))
    return on, ints, bool(gl.glGetParameter(gl.GL_DEPTH_WRITEMASK))


def _set_gl_switches(saved) -> None:
    from vispy.gloo import gl

    on, ints, mask = saved
    for n, enabled in zip(_SWITCHES, on):
        (gl.glEnable if enabled else gl.glDisable)(getattr(gl, n))
    gl.glBlendFuncSeparate(*ints[:4])
    gl.glDepthFunc(ints[4])
    gl.glDepthMask(mask)
