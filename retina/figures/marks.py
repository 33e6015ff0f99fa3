"""The point marks every visual-field map uses, shared by the figures and the viewer.

One table says how the beak direction and both ends of the field axis are drawn, so a figure and
the viewer's map mark them alike: the beak is a plus sign, the field direction ``B`` a filled
(black) circle, its opposite ``-B`` an open (white) circle (a radical-pair yield does not tell the
two ends apart, so both are shown).  Each entry gives the matplotlib marker and the vispy symbol of
the same shape, the face and edge colours and the label.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Mark", "MARKS"]


@dataclass(frozen=True)
class Mark:
    """How one point is marked.

    Attributes
    ----------
    label : str
        Text written beside the mark.
    mpl : str
        matplotlib marker code.
    vispy : str
        vispy ``Markers`` symbol of the same shape.
    face, edge : tuple of float
        RGBA face and edge colours in [0, 1].
    size_pt : float
        Marker size in points (figures); the viewer draws it at ``2 * size_pt`` pixels.
    edge_width : float
        Edge width in points.
    """

    label: str
    mpl: str
    vispy: str
    face: tuple
    edge: tuple
    size_pt: float
    edge_width: float


_BLACK = (0.0, 0.0, 0.0, 1.0)
_WHITE = (1.0, 1.0, 1.0, 1.0)

#: The marks by name: ``"beak"``, ``"field"`` (B) and ``"field_opposite"`` (-B).
MARKS = {
    "beak": Mark("beak", "+", "cross", _BLACK, _WHITE, 8.0, 1.2),
    "field": Mark("B", "o", "disc", _BLACK, _WHITE, 5.0, 0.8),
    "field_opposite": Mark("-B", "o", "disc", _WHITE, _BLACK, 5.0, 0.8),
}
