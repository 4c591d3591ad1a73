"""Principal radii of gyration of body segments, and whole-body inertia from them.

A segment's moment of inertia about an axis through its own center of mass is
``I = m (r · L)^2``, with ``m`` its mass, ``L`` its length (between the table's two landmarks)
and ``r`` the radius of gyration as a fraction of that length. de Leva gives ``r`` about three
principal axes per segment:

- *sagittal*: the anteroposterior axis (rotation in the frontal plane, a cartwheel),
- *transverse*: the mediolateral axis (rotation in the sagittal plane, a somersault),
- *longitudinal*: the segment's long axis (a twist).

The column names of Table 4 are read this way by Gurchiek's transcription (it gives its
reasons: the trunk's and hand's larger radii fall on the axes one expects); the two differ
by less than 10 % for every segment below, so a swap changes whole-body inertia little.

In this module a segment's own frame has **x mediolateral, y along the segment, z
anteroposterior**, like a Blender bone (y along the bone): ``radii[:, 0]`` is the transverse,
``radii[:, 1]`` the longitudinal and ``radii[:, 2]`` the sagittal radius.

References
----------
de Leva P. (1996), "Adjustments to Zatsiorsky-Seluyanov's segment inertia parameters",
J. Biomech. 29(9):1223-1230, Table 4 (radii of gyration in % of segment length). Read from two
open transcriptions that agree digit for digit: BMClab/BMC ``data/BSP_ZdeLeva.txt`` (M. Duarte)
and R. Gurchiek's ``deleva.m`` (2018).
Santschi W.R., Dubois J., Omoto C. (1963), "Moments of inertia and centers of gravity of the
living human body", AMRL-TDR-63-36, Wright-Patterson AFB: whole-body moments of the standing body
(the check in tests/core/test_segment_inertia.py).
"""
from __future__ import annotations

from typing import Mapping

import numpy as np

from .body_segments import SIDES, SegmentTable

# (sagittal, transverse, longitudinal) radius of gyration, fraction of segment length, for the
# segment definitions body_segments uses (same endpoints as the mass and CoM columns there).
# de Leva 1996, Table 4:
_DE_LEVA_MALE_RADII = {
    "head_neck": (0.303, 0.315, 0.261),   # "Head 2": vertex -> cervicale (C7)
    "trunk": (0.384, 0.358, 0.197),       # "Trunk 3": mid shoulder joint centers -> mid hip joint centers
    "upper_arm": (0.285, 0.269, 0.158),   # shoulder JC -> elbow JC
    "forearm": (0.276, 0.265, 0.121),     # elbow JC -> wrist JC
    "hand": (0.628, 0.513, 0.401),        # wrist JC -> 3rd metacarpale
    "thigh": (0.329, 0.329, 0.149),       # hip JC -> knee JC
    "shank": (0.251, 0.246, 0.102),       # knee JC -> ankle JC
    "foot": (0.257, 0.245, 0.124),        # heel -> toe tip (rigs: ankle -> toe, see body_segments)
}
_DE_LEVA_FEMALE_RADII = {
    "head_neck": (0.271, 0.295, 0.261),
    "trunk": (0.379, 0.361, 0.182),
    "upper_arm": (0.278, 0.260, 0.148),
    "forearm": (0.261, 0.257, 0.094),
    "hand": (0.531, 0.454, 0.335),
    "thigh": (0.369, 0.364, 0.162),
    "shank": (0.267, 0.263, 0.092),
    "foot": (0.299, 0.279, 0.139),
}
RADII_OF_GYRATION = {
    "de_leva_male": _DE_LEVA_MALE_RADII,
    "de_leva_female": _DE_LEVA_FEMALE_RADII,
    # Dempster (Winter 2009, Table 4.1) gives one radius per segment, about the transverse axis
    # only; its mass and CoM columns are combined with de Leva's male radii (an approximation:
    # the two tables' endpoints differ at the head, trunk and thigh, see REFERENCES.md §2).
    "dempster": _DE_LEVA_MALE_RADII,
}
RADII_SOURCE = "de Leva (1996), J. Biomech. 29(9):1223-1230, Table 4"


def segment_radii(table: SegmentTable) -> np.ndarray:
    """Radii of gyration of every segment of ``table`` in the segment frame (x ML, y long, z AP).

    Returns
    -------
    ndarray, shape (k, 3)
        Fractions of segment length, rows in ``table.segments`` order.
    """
    radii = RADII_OF_GYRATION[table.name]
    rows = []
    for seg in table.segments:
        base = seg.name.split(".")[0] if seg.name.split(".")[-1] in SIDES else seg.name
        sag, trans, long_ = radii[base]
        rows.append((trans, long_, sag))
    return np.array(rows, dtype=float)


def segment_frames(long_axis: np.ndarray, lateral_hint: np.ndarray) -> np.ndarray:
    """Orthonormal segment frames from the long axis and an approximate mediolateral direction.

    Parameters
    ----------
    long_axis : ndarray, shape (..., 3)
        Along the segment (start -> end landmark); need not be unit length.
    lateral_hint : ndarray, shape (..., 3)
        Roughly mediolateral (e.g. a bone's x axis); made orthogonal to the long axis.

    Returns
    -------
    ndarray, shape (..., 3, 3)
        Rotation matrices whose columns are the segment's x (ML), y (long), z (AP) in world axes.
    """
    y = np.asarray(long_axis, dtype=float)
    y = y / np.linalg.norm(y, axis=-1, keepdims=True)
    x = np.asarray(lateral_hint, dtype=float)
    x = x - np.sum(x * y, axis=-1, keepdims=True) * y
    x = x / np.linalg.norm(x, axis=-1, keepdims=True)
    z = np.cross(x, y)
    return np.stack([x, y, z], axis=-1)


def inertia_tensors(mass_kg: np.ndarray, radii_m: np.ndarray, frames: np.ndarray) -> np.ndarray:
    """World-axis inertia tensors of segments about their own CoMs: ``R diag(m r^2) R^T``.

    Parameters
    ----------
    mass_kg : ndarray, shape (k,)
    radii_m : ndarray, shape (..., k, 3), radii of gyration in metres about the frame's x, y, z
    frames : ndarray, shape (..., k, 3, 3), segment frames (columns = axes in world)

    Returns
    -------
    ndarray, shape (..., k, 3, 3), kg m^2
    """
    principal = np.asarray(mass_kg, dtype=float)[..., :, None] * np.asarray(radii_m, dtype=float) ** 2
    return np.einsum("...ij,...j,...kj->...ik", frames, principal, frames)


def whole_body_inertia(mass_kg: np.ndarray, com_m: np.ndarray, radii_m: np.ndarray,
                       frames: np.ndarray) -> tuple:
    """Whole-body CoM and inertia tensor about it (parallel-axis theorem).

    Parameters
    ----------
    mass_kg : ndarray (k,); com_m : ndarray (..., k, 3); radii_m : ndarray (..., k, 3);
    frames : ndarray (..., k, 3, 3)

    Returns
    -------
    com : ndarray (..., 3); inertia : ndarray (..., 3, 3) in kg m^2 about the whole-body CoM
    """
    m = np.asarray(mass_kg, dtype=float)
    com_m = np.asarray(com_m, dtype=float)
    total = m.sum()
    com = np.einsum("k,...kj->...j", m, com_m) / total
    d = com_m - com[..., None, :]
    d2 = np.sum(d * d, axis=-1)
    orbital = m[:, None, None] * (d2[..., None, None] * np.eye(3) - d[..., :, None] * d[..., None, :])
    return com, np.sum(orbital + inertia_tensors(m, radii_m, frames), axis=-3)


def radii_metres(table: SegmentTable, lengths_m: np.ndarray) -> np.ndarray:
    """Radii of gyration in metres: table fractions × per-sample segment lengths (..., k) -> (..., k, 3)."""
    return segment_radii(table) * np.asarray(lengths_m, dtype=float)[..., None]


def segment_lengths(table: SegmentTable, landmarks: Mapping[str, np.ndarray]) -> np.ndarray:
    """Length of every segment between its two landmarks, shape (n, k)."""
    return np.stack([np.linalg.norm(landmarks[s.end] - landmarks[s.start], axis=-1) for s in table.segments],
                    axis=-1)
