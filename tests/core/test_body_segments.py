"""Segment tables as transcribed, bone-name matching, and the whole-body CoM."""
import numpy as np
import pytest

from overlap_assist.core.body_segments import (
    DE_LEVA_FEMALE, DE_LEVA_MALE, DEMPSTER_WINTER, landmark_positions, match_roles, parse_bone_name,
    whole_body_com)


def _mass(table, name):
    return next(s.mass_fraction for s in table.segments if s.name == name)


def _com(table, name):
    return next(s.com_fraction for s in table.segments if s.name == name)


def test_dempster_values_as_tabulated_by_winter_2009_table_4_1():
    # Winter 2009, Biomechanics and Motor Control of Human Movement, 4th ed., Table 4.1.
    t = DEMPSTER_WINTER
    assert (_mass(t, "head_neck"), _mass(t, "trunk")) == (0.081, 0.497)
    assert (_mass(t, "upper_arm.L"), _com(t, "upper_arm.L")) == (0.028, 0.436)
    assert (_mass(t, "forearm.R"), _com(t, "forearm.R")) == (0.016, 0.430)
    assert (_mass(t, "hand.L"), _com(t, "hand.L")) == (0.006, 0.506)
    assert (_mass(t, "thigh.L"), _com(t, "thigh.L")) == (0.100, 0.433)
    assert (_mass(t, "shank.R"), _com(t, "shank.R")) == (0.0465, 0.433)
    assert (_mass(t, "foot.L"), _com(t, "foot.L")) == (0.0145, 0.50)


def test_de_leva_1996_table_4_values():
    # de Leva 1996, J. Biomech. 29(9):1223-1230, Table 4 (via two open transcriptions, REFERENCES.md §2).
    assert (_mass(DE_LEVA_MALE, "thigh.L"), _com(DE_LEVA_MALE, "thigh.L")) == (0.1416, 0.4095)
    assert (_mass(DE_LEVA_FEMALE, "thigh.L"), _com(DE_LEVA_FEMALE, "thigh.L")) == (0.1478, 0.3612)
    assert (_mass(DE_LEVA_MALE, "trunk"), _com(DE_LEVA_MALE, "trunk")) == (0.4346, 0.4310)
    assert _mass(DE_LEVA_MALE, "upper_arm.R") == 0.0271


@pytest.mark.parametrize("table,tol", [
    (DEMPSTER_WINTER, 1e-12),   # sums to 1 exactly (REFERENCES.md §2, derived)
    (DE_LEVA_MALE, 1e-4),       # 100.00 %
    (DE_LEVA_FEMALE, 2e-4),     # 99.99 %: rounding in the published table
])
def test_mass_fractions_sum_to_one(table, tol):
    assert table.total_mass_fraction == pytest.approx(1.0, abs=tol)


@pytest.mark.parametrize("name,expected", [
    ("thigh.L", ("thigh", "L", 0)),
    ("DEF-thigh.R.001", ("thigh", "R", 1)),
    ("mixamorig:LeftUpLeg", ("upleg", "L", 0)),
    ("RightForeArm", ("forearm", "R", 0)),
    ("L_Hand", ("hand", "L", 0)),
    ("upperarm_r", ("upperarm", "R", 0)),
    ("Left Shin", ("shin", "L", 0)),
    ("Head", ("head", "", 0)),
])
def test_parse_bone_name_conventions(name, expected):
    assert parse_bone_name(name) == expected


def test_matching_keeps_forearm_and_upper_arm_apart_and_lists_missing():
    names = ["Hips", "Spine", "Neck", "Head", "LeftArm", "LeftForeArm", "LeftHand", "RightArm",
             "RightForeArm", "LeftUpLeg", "LeftLeg", "LeftFoot", "RightUpLeg", "RightLeg", "RightFoot"]
    roles, unmatched = match_roles(names)
    assert roles["upper_arm.L"] == ["LeftArm"] and roles["forearm.L"] == ["LeftForeArm"]
    assert roles["shin.R"] == ["RightLeg"] and roles["thigh.R"] == ["RightUpLeg"]
    assert unmatched == ["hand.R"]
    roles, unmatched = match_roles(names, overrides={"hand.R": "RightPalmBone"})
    assert roles["hand.R"] == ["RightPalmBone"] and unmatched == []


def test_split_bones_kept_in_order_and_hips_preferred_over_root():
    roles, _ = match_roles(["root", "hips", "thigh.L.001", "thigh.L"])
    assert roles["thigh.L"] == ["thigh.L", "thigh.L.001"]
    assert roles["hips"] == ["hips"]


def test_whole_body_com_of_a_t_pose_is_about_56_percent_of_stature():
    # Whole-body CoM in standing is about 0.55-0.57 x stature (REFERENCES.md §2 flag (c), from memory);
    # a coarse check with a 1.75 m stick figure in proportions of our own.
    def col(x, z):
        return np.array([[x, 0.0, z]])
    heads, tails = {}, {}
    for s, x in (("L", 0.1), ("R", -0.1)):
        heads[f"thigh.{s}"], tails[f"thigh.{s}"] = col(x, 0.92), col(x, 0.50)
        heads[f"shin.{s}"], tails[f"shin.{s}"] = col(x, 0.50), col(x, 0.08)
        heads[f"foot.{s}"], tails[f"foot.{s}"] = col(x, 0.08), col(x + 0.0, 0.0)
        heads[f"upper_arm.{s}"], tails[f"upper_arm.{s}"] = col(2 * x, 1.45), col(2.2 * x, 1.15)
        heads[f"forearm.{s}"], tails[f"forearm.{s}"] = col(2.2 * x, 1.15), col(2.3 * x, 0.88)
        heads[f"hand.{s}"], tails[f"hand.{s}"] = col(2.3 * x, 0.88), col(2.3 * x, 0.70)
    heads["neck"], tails["neck"] = col(0, 1.50), col(0, 1.58)
    heads["head"], tails["head"] = col(0, 1.58), col(0, 1.75)
    roles, unmatched = match_roles(list(heads))
    assert unmatched == ["hips"]
    for table in (DEMPSTER_WINTER, DE_LEVA_MALE, DE_LEVA_FEMALE):
        com, mass = whole_body_com(table, landmark_positions(roles, heads, tails))
        assert 0.53 * 1.75 < com[0, 2] < 0.59 * 1.75, table.name
        assert abs(com[0, 0]) < 1e-12  # left-right symmetric
