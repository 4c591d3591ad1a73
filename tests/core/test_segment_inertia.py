"""Segment radii of gyration as transcribed, and whole-body inertia of a standing model."""
import numpy as np
import pytest

from overlap_assist.core import body_segments as bs
from overlap_assist.core import segment_inertia as si


def _row(table, name):
    i = next(k for k, s in enumerate(table.segments) if s.name == name)
    return si.segment_radii(table)[i]


@pytest.mark.parametrize("table,segment,sag,trans,long_", [
    # de Leva 1996, J. Biomech. 29(9), Table 4, % of segment length (via BMClab/BMC BSP_ZdeLeva.txt
    # and Gurchiek's deleva.m, which agree): (sagittal, transverse, longitudinal).
    (bs.DE_LEVA_MALE, "thigh.L", 0.329, 0.329, 0.149),
    (bs.DE_LEVA_MALE, "trunk", 0.384, 0.358, 0.197),          # "Trunk 3" (MIDS -> MIDH)
    (bs.DE_LEVA_MALE, "head_neck", 0.303, 0.315, 0.261),      # "Head 2" (VERT -> CERV)
    (bs.DE_LEVA_MALE, "hand.R", 0.628, 0.513, 0.401),
    (bs.DE_LEVA_FEMALE, "forearm.L", 0.261, 0.257, 0.094),
    (bs.DE_LEVA_FEMALE, "shank.R", 0.267, 0.263, 0.092),      # knee JC -> ankle JC
    (bs.DE_LEVA_FEMALE, "foot.L", 0.299, 0.279, 0.139),
])
def test_radii_as_transcribed_in_the_segment_frame(table, segment, sag, trans, long_):
    # Segment frame x = mediolateral (transverse radius), y = long, z = anteroposterior (sagittal).
    assert tuple(_row(table, segment)) == (trans, long_, sag)


def test_every_table_segment_has_radii():
    for table in bs.SEGMENT_TABLES.values():
        r = si.segment_radii(table)
        assert r.shape == (len(table.segments), 3) and np.all((r > 0.05) & (r < 0.7))


def test_rotated_segment_tensor_by_hand():
    # A 2 kg segment 0.4 m long with radii (0.3, 0.1, 0.25) x L, its long axis turned to world x
    # (rotation of +90 deg about z): I about world x is the longitudinal m (0.1 L)^2, about world y
    # the mediolateral m (0.3 L)^2, about z the anteroposterior m (0.25 L)^2. Worked by hand.
    frames = si.segment_frames(np.array([[1.0, 0, 0]]), np.array([[0, -1.0, 0]]))
    radii = np.array([[0.3, 0.1, 0.25]]) * 0.4
    inertia = si.inertia_tensors(np.array([2.0]), radii, frames)[0]
    expected = np.diag([2 * 0.04**2, 2 * 0.12**2, 2 * 0.1**2])
    np.testing.assert_allclose(inertia, expected, atol=1e-15)


def test_parallel_axis_by_hand():
    # Two point-like 1 kg masses (tiny radii) 1 m apart on x: I about the CoM = 2 x 1 x 0.5^2 about y and z.
    com = np.array([[0.0, 0, 0], [1.0, 0, 0]])
    frames = np.broadcast_to(np.eye(3), (2, 3, 3))
    c, inertia = si.whole_body_inertia(np.ones(2), com, np.zeros((2, 3)), frames)
    np.testing.assert_allclose(c, [0.5, 0, 0])
    np.testing.assert_allclose(inertia, np.diag([0.0, 0.5, 0.5]), atol=1e-15)


# The demo character's rest pose (our own proportions: 1.74 m, arms hanging, blender/demo_scene.py).
_STANDING = {
    "hips": ((0, 0, 0.95), (0, 0, 1.08)), "spine": ((0, 0, 1.08), (0, 0, 1.42)),
    "neck": ((0, 0, 1.42), (0, 0, 1.52)), "head": ((0, 0, 1.52), (0, 0, 1.74)),
    "upper_arm.L": ((0.18, 0, 1.40), (0.20, 0, 1.12)), "forearm.L": ((0.20, 0, 1.12), (0.21, 0, 0.86)),
    "hand.L": ((0.21, 0, 0.86), (0.21, 0, 0.68)), "thigh.L": ((0.10, 0, 0.95), (0.10, 0, 0.52)),
    "shin.L": ((0.10, 0, 0.52), (0.10, 0, 0.09)), "foot.L": ((0.10, 0, 0.09), (0.10, -0.15, 0.0)),
}
STATURE_M = 1.74


def standing_landmarks():
    bones = dict(_STANDING)
    for name, (h, t) in _STANDING.items():
        if name.endswith(".L"):
            bones[name[:-2] + ".R"] = ((-h[0], h[1], h[2]), (-t[0], t[1], t[2]))
    heads = {k: np.array([v[0]], float) for k, v in bones.items()}
    tails = {k: np.array([v[1]], float) for k, v in bones.items()}
    roles, unmatched = bs.match_roles(list(bones))
    assert not unmatched
    return bs.landmark_positions(roles, heads, tails)


def standing_inertia(table):
    lm = standing_landmarks()
    coms = bs.segment_coms(table, lm)
    com = np.stack([coms[s.name] for s in table.segments], axis=1)
    mass = np.array([s.mass_fraction for s in table.segments])
    long_axis = np.stack([lm[s.end] - lm[s.start] for s in table.segments], axis=1)
    frames = si.segment_frames(long_axis, np.broadcast_to([1.0, 0, 0], long_axis.shape))
    _c, inertia = si.whole_body_inertia(mass, com, si.radii_metres(table, si.segment_lengths(table, lm)), frames)
    return np.diag(inertia[0]) / STATURE_M**2     # per unit body mass and stature^2


# Santschi, Dubois & Omoto 1963 (AMRL-TDR-63-36), standing position, three subjects as reproduced
# in Tozeren (2000), Human Body Dynamics, Table A.2.1 (lb in s^2 x 0.11298 = kg m^2), normalised here by
# mass x stature^2 (derived): about the anteroposterior axis 0.0510-0.0563, the mediolateral axis
# 0.0456-0.0508, the long axis 0.0050-0.0059. The report states the pendulum method's accuracy as
# +-2 % to +-8 % depending on position and axis, so the transverse ranges are widened by 8 %.
ML_RANGE = (0.0456 * 0.92, 0.0508 * 1.08)
AP_RANGE = (0.0510 * 0.92, 0.0563 * 1.08)
# The long axis is widened by 20 %: a stick rig puts each arm on its bone line (here 0.18-0.21 m
# from the midline, hands against the thighs), while the subjects' upper arms and hands stood wider
# of the trunk's soft tissue; the long-axis moment is dominated by that lateral spacing (m d^2),
# not by the table's radii. The twist axis matters least for the spin check (animated twists are slow).
LONG_RANGE = (0.0050 * 0.8, 0.0059 * 1.2)


@pytest.mark.parametrize("table", [bs.DE_LEVA_MALE, bs.DE_LEVA_FEMALE, bs.DEMPSTER_WINTER])
def test_standing_whole_body_inertia_in_published_range(table):
    ml, ap, long_ = standing_inertia(table)
    assert ML_RANGE[0] <= ml <= ML_RANGE[1]
    assert AP_RANGE[0] <= ap <= AP_RANGE[1]
    assert LONG_RANGE[0] <= long_ <= LONG_RANGE[1]
    assert ap > ml > 10 * long_     # ordering as in all three subjects
