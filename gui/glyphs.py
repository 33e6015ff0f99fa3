"""Glyphs of the views' GL text, made once: kept for the process and in a cache folder on disk.

Why
---
vispy draws text from a glyph atlas per font manager.  Each glyph it has not seen is rendered by
freetype at 256 pt and turned into a signed distance field on the CPU (about 10 ms of CPU per
glyph), and each canvas has its own atlas (one OpenGL context each), so the viewer's two canvases
rendered about 50 glyphs at every start: the largest part of the time to the first picture.  Here
the two expensive results, the glyph's metrics and bitmap and its distance field, are kept in a
process-wide table (a glyph the other canvas has made costs only its upload) and in files of a
cache folder (a later start reads them instead of making them again).  The atlas, the layout and
the drawing stay vispy's own: what is cached is byte for byte what vispy would make.

Contract (owned here)
---------------------
- :func:`font_manager` returns a vispy ``FontManager`` whose fonts take their glyphs from the
  caches; give one to every Text visual of a canvas (``visual._font_manager``).
- Cache folder: ``RETINA_VIEWER_GLYPH_CACHE`` if set (an empty value turns the disk cache off),
  else ``$XDG_CACHE_HOME/retina-compass/glyphs`` (default ``~/.cache/...``).  One ``.npz`` per
  glyph, named by a hash of the vispy version, the font (face, bold, italic, size) and the
  character; written atomically (:mod:`retina.io.atomic`).  A file that cannot be read or written
  is ignored (the glyph is made as without a cache): the cache never stops the viewer.
- Kerning is computed for every font as vispy does (it depends on the glyphs already loaded).
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np

__all__ = ["font_manager", "cache_dir", "clear_memory", "STATS"]

#: (font key, char) -> (glyph entries without kerning, distance field (h, w, 3) uint8)
_MEMORY: dict = {}
#: How the glyphs were obtained in this process: "made", "memory", "disk".
STATS = {"made": 0, "memory": 0, "disk": 0}
_CLASS = None


def cache_dir() -> Path | None:
    """The glyph cache folder (module docstring), or None when the disk cache is off.

    Returns
    -------
    pathlib.Path or None
        ``RETINA_VIEWER_GLYPH_CACHE`` when set (None when it is empty), else
        ``$XDG_CACHE_HOME/retina-compass/glyphs``; the folder need not exist yet.
    """
    env = os.environ.get("RETINA_VIEWER_GLYPH_CACHE")
    if env is not None:
        return Path(env) if env.strip() else None
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "retina-compass" / "glyphs"


def clear_memory() -> None:
    """Forget the glyphs kept in this process (tests, benchmarks)."""
    _MEMORY.clear()
    for k in STATS:
        STATS[k] = 0


def _file_for(key) -> Path | None:
    folder = cache_dir()
    if folder is None:
        return None
    import vispy

    h = hashlib.sha256(repr((vispy.__version__,) + key).encode()).hexdigest()[:32]
    return folder / f"{h}.npz"


def _read(key):
    path = _file_for(key)
    if path is None or not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as z:
            glyph = {"char": key[-1], "offset": tuple(int(x) for x in z["offset"]),
                     "bitmap": np.array(z["bitmap"], np.uint8), "advance": float(z["advance"])}
            return glyph, np.array(z["sdf"], np.uint8)
    except Exception:  # noqa: BLE001 - a damaged cache file is only a miss
        return None


def _write(key, glyph, sdf) -> None:
    path = _file_for(key)
    if path is None:
        return
    try:
        import io

        from retina.io.atomic import atomic_write_bytes

        buf = io.BytesIO()
        np.savez(buf, offset=np.asarray(glyph["offset"], np.int64), bitmap=glyph["bitmap"],
                 advance=np.asarray(glyph["advance"], float), sdf=sdf)
        path.parent.mkdir(parents=True, exist_ok=True)
        atomic_write_bytes(path, buf.getvalue(), force=True)
    except Exception:  # noqa: BLE001 - a cache that cannot be written is no error
        pass


def _texture_font_class():
    global _CLASS
    if _CLASS is not None:
        return _CLASS
    from vispy.util.fonts import _load_glyph
    from vispy.visuals.text.text import TextureFont

    class CachedTextureFont(TextureFont):
        """vispy's TextureFont, its glyphs taken from the caches (module docstring).

        Its filter kernel (the table the text shader samples to smooth the glyphs' edges) is
        held as a texture made once.  vispy's ``Text`` visual hands the font's kernel to its
        program at every draw; given an array, the program uploads it again each time (a
        16 x 1024 RGBA float table, 256 kB per Text visual per frame), given a texture it only
        binds it.  Same texture, same values: the pixels do not change.
        """

        def __init__(self, *args, **kwargs):
            super().__init__(*args, **kwargs)
            from vispy.gloo import Texture2D

            if isinstance(self._kernel, np.ndarray):
                self._kernel = Texture2D(self._kernel)

        def _key(self, char):
            f = self._font
            return (str(f["face"]), bool(f["bold"]), bool(f["italic"]), int(f["size"]),
                    self._spread, self.ratio, char)

        def _load_char(self, char):
            key = self._key(char)
            hit = _MEMORY.get(key)
            if hit is not None:
                STATS["memory"] += 1
            else:
                hit = _read(key)
                if hit is not None:
                    STATS["disk"] += 1
                    _MEMORY[key] = hit
            if hit is None:
                STATS["made"] += 1
                return self._make_char(char, key)
            base, sdf = hit
            glyph = dict(base, kerning={})
            self._glyphs[char] = glyph
            self._kern(glyph)
            h, w = sdf.shape[:2]
            x, y = self._region(w, h)
            self._atlas[y:y + h, x:x + w] = sdf
            self._set_texcoords(glyph, x, y, w, h)

        def _make_char(self, char, key):
            # as vispy's TextureFont._load_char, keeping the distance field it makes
            _load_glyph(self._font, char, self._glyphs)
            glyph = self._glyphs[char]
            bitmap = glyph["bitmap"]
            sp = self._spread
            data = np.zeros((bitmap.shape[0] + 2 * sp, bitmap.shape[1] + 2 * sp), np.uint8)
            data[sp:-sp, sp:-sp] = bitmap
            h, w = data.shape[0] // self.ratio, data.shape[1] // self.ratio
            sdf = np.zeros((h, w, 3), np.uint8)
            self._renderer.render_to_texture(data, sdf, (0, 0), (w, h))
            x, y = self._region(w, h)
            self._atlas[y:y + h, x:x + w] = sdf
            self._set_texcoords(glyph, x, y, w, h)
            base = {k: glyph[k] for k in ("char", "offset", "bitmap", "advance")}
            _MEMORY[key] = (base, sdf)
            _write(key, base, sdf)

        def _region(self, w, h):
            region = self._atlas.get_free_region(w + 2, h + 2)
            if region is None:
                raise RuntimeError("Cannot store glyph")
            return region[0] + 1, region[1] + 1

        def _set_texcoords(self, glyph, x, y, w, h):
            sh = self._atlas.shape
            glyph.update(size=(w, h), texcoords=(x / float(sh[1]), y / float(sh[0]),
                                                 (x + w) / float(sh[1]), (y + h) / float(sh[0])))

        def _kern(self, glyph):
            # vispy's _load_glyph: kerning of the new glyph against every glyph already loaded
            try:
                from vispy.util.fonts._freetype import _load_font
            except ImportError:  # another font back-end: no kerning, as it gives none either
                return
            f = self._font
            face = _load_font(f["face"], f["bold"], f["italic"])
            face.set_char_size(f["size"] * 64)
            char = glyph["char"]
            for other_char, other in self._glyphs.items():
                glyph["kerning"][other_char] = face.get_kerning(other_char, char).x / 64.0
                other["kerning"][char] = face.get_kerning(char, other_char).x / 64.0

    _CLASS = CachedTextureFont
    return _CLASS


def font_manager():
    """A vispy ``FontManager`` (CPU distance fields) whose fonts use the glyph caches.

    Returns
    -------
    vispy.visuals.text.text.FontManager
    """
    from vispy.visuals.text.text import FontManager

    cls = _texture_font_class()

    class CachedFontManager(FontManager):
        def get_font(self, face, bold=False, italic=False):
            key = "%s-%s-%s" % (face, bold, italic)
            if key not in self._fonts:
                self._fonts[key] = cls(dict(face=face, bold=bold, italic=italic), self._renderer)
            return self._fonts[key]

    return CachedFontManager(method="cpu")
