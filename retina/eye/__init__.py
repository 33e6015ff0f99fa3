"""Eyes, receptors and molecular ordering: from a yield function to modulation patterns.

- :mod:`retina.eye.field`: the geomagnetic field (north-east-down world frame; IGRF-14).
- :mod:`retina.eye.pose`: head pose (yaw, pitch, roll), head scans, the field in the head frame.
- :mod:`retina.eye.geometry`: eyes, receptor placement, axes, local frames, solid angles.
- :mod:`retina.eye.ordering`: orientation distributions of the molecules in a receptor.
- :mod:`retina.eye.pattern`: :class:`RetinaModel` and :class:`Pattern`.

Each convention is stated in the docstring of the module that owns it.
"""

from retina.eye.field import Field, field_at, field_vector
from retina.eye.geometry import Eye, Receptors, build_receptors, default_eyes
from retina.eye.ordering import (Aligned, Composite, Cone, ConeNoTwist, FreeRotation, Isotropic,
                                 Ordering, Planar)
from retina.eye.pattern import Pattern, RetinaModel, modulation, resample
from retina.eye.pose import HeadScan, Pose, head_field, head_field_dyaw, pose_rotation, yaw_sweep

__all__ = [
    "Field", "field_at", "field_vector",
    "Eye", "Receptors", "build_receptors", "default_eyes",
    "Ordering", "Aligned", "FreeRotation", "Cone", "ConeNoTwist", "Planar", "Isotropic", "Composite",
    "RetinaModel", "Pattern", "modulation", "resample",
    "Pose", "HeadScan", "pose_rotation", "head_field", "head_field_dyaw", "yaw_sweep",
]
