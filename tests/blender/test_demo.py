"""The demo end to end (small renders): flags, report, contact sheet, and the saved .blend."""
import json
import struct
import zlib

import bpy
import numpy as np
import pytest

from overlap_assist.blender.contact_sheet import SheetLayout
from overlap_assist.blender.demo_character import CHAINS, DEMO_JUMPS
from overlap_assist.core.constants import FLOATY_RATIO, HORIZONTAL_EASE_MPS2, STANDARD_GRAVITY_MPS2
from overlap_assist.blender.flight_fix_layer import FIX_TRACK_NAME
from overlap_assist.demo import FIXED_SUFFIX, FULL, SHEET_EVENTS, SMALL, run_demo

GOOD, FLOATY = (j.name for j in DEMO_JUMPS)
FIXED = FLOATY + FIXED_SUFFIX
ROWS = (GOOD, FLOATY, FIXED)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    lines = []
    result = run_demo(out, small=True, progress=lines.append)
    result["progress"] = lines
    return result


def read_png(path):
    """(width, height, rgb array) of an 8-bit RGB PNG whose rows use filter 0 (what our writer emits)."""
    data = open(path, "rb").read()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, chunks = 8, {}
    while pos < len(data):
        n, tag = struct.unpack(">I4s", data[pos:pos + 8])
        body = data[pos + 8:pos + 8 + n]
        assert zlib.crc32(tag + body) & 0xFFFFFFFF == struct.unpack(">I", data[pos + 8 + n:pos + 12 + n])[0]
        chunks[tag] = chunks.get(tag, b"") + body
        pos += 12 + n
    w, h, depth, colour = struct.unpack(">IIBB", chunks[b"IHDR"][:10])
    assert (depth, colour) == (8, 2)
    raw = np.frombuffer(zlib.decompress(chunks[b"IDAT"]), dtype=np.uint8).reshape(h, 1 + 3 * w)
    assert not raw[:, 0].any()
    return w, h, raw[:, 1:].reshape(h, w, 3)


def test_the_flawed_clip_is_flagged_and_the_good_one_is_not(demo):
    saved = json.loads(open(demo["json"], encoding="utf-8").read())
    for flags in (demo["flags"], {k: c["flags"] for k, c in saved["clips"].items()}):
        good, bad = flags[GOOD], flags[FLOATY]
        assert good["flight"] and bad["flight"]
        assert not good["floaty"] and good["verdict"].startswith("ballistic")
        assert abs(good["gravity_ratio"] - 1.0) < 0.03
        assert not good["late_arm_swing"] and good["arm_swing_offset_frames"] < 0
        assert not good["horizontal_easing"] and abs(good["horizontal_accel_mps2"]) < HORIZONTAL_EASE_MPS2
        assert bad["floaty"] and bad["gravity_ratio"] < FLOATY_RATIO
        # The scenario animates 0.45 g in flight; the analysis must find about that.
        spec = DEMO_JUMPS[1].spec
        assert abs(bad["gravity_ratio"] - spec.flight_gravity_mps2 / STANDARD_GRAVITY_MPS2) < 0.03
        assert bad["late_arm_swing"] and bad["arm_swing_offset_frames"] > 1
        assert bad["horizontal_easing"]
        assert abs(bad["horizontal_accel_mps2"] - spec.flight_forward_accel_mps2) < 0.2
    assert any("floaty" in line for line in demo["summary_lines"])
    assert "plausibility" in saved["caution"]
    # The default body source (Automatic) takes the CoM of the demo character; its feet are planted.
    for clip in saved["clips"].values():
        assert clip["analysis"]["body_source"] == "com" and clip["analysis"]["airborne_from"] == "feet"
        assert [f["kind"] for f in clip["analysis"]["flights"]] == ["jump"]


def test_every_chain_is_baked_with_fewer_keys_and_counts_add_up(demo):
    saved = json.loads(open(demo["json"], encoding="utf-8").read())
    for name, clip in saved["clips"].items():
        rows = clip["chains"]
        assert [r["chain"] for r in rows] == [c[0] for c in CHAINS]
        assert sum(r["keys_before"] for r in rows) == clip["bake"]["keys_before"]
        assert sum(r["keys_after"] for r in rows) == clip["bake"]["keys_written"]
        for r in rows:
            assert 0 < r["keys_after"] < r["keys_before"], (name, r)
            assert r["max_tip_swing_deg"] > 5.0, (name, r)
        assert clip["bake"]["max_error_deg"] <= clip["bake"]["tolerance_deg"] + 1e-6
        assert set(clip["timings_s"]) >= {"build_s", "analyse_s", "simulate_and_bake_s", "render_s"}


def test_the_flawed_clip_has_a_spin_finding_and_its_fixed_copy_is_ballistic(demo):
    saved = json.loads(open(demo["json"], encoding="utf-8").read())
    clips = saved["clips"]
    (good,) = clips[GOOD]["flight_physics"]["spin"]
    (bad,) = clips[FLOATY]["flight_physics"]["spin"]
    # The good jump turns its trunk in flight by what keeps H constant: no finding. The floaty
    # one swings its arms late with the trunk held: H changes with nothing to push on.
    assert good["finding"] is None and abs(good["change_deg_per_s"]) < good["threshold_deg_per_s"]
    assert bad["finding"] is not None and abs(bad["change_deg_per_s"]) > bad["threshold_deg_per_s"]
    # The fixed copy: same keys, the fix layer puts the CoM on the 1 g arc through the same contacts.
    fixed = clips[FIXED]
    assert fixed["flags"]["verdict"].startswith("ballistic") and not fixed["flags"]["floaty"]
    assert abs(fixed["flags"]["gravity_ratio"] - 1.0) < 0.03
    (fl,) = fixed["analysis"]["flights"]
    (fl0,) = clips[FLOATY]["analysis"]["flights"]
    assert abs(fl["takeoff_frame"] - fl0["takeoff_frame"]) < 0.1 and abs(fl["touchdown_frame"] - fl0["touchdown_frame"]) < 0.1
    # Apex over the contacts of a flight lasting T: g T^2 / 8 (Halliday, Resnick & Walker, Fundamentals
    # of Physics, ch. 4); from 0.45 g to 1 g in the same T it rises by (1 - 0.45) g T^2 / 8.
    t_s = (fl0["touchdown_frame"] - fl0["takeoff_frame"]) / fixed["analysis"]["fps"]
    g, g_floaty = STANDARD_GRAVITY_MPS2, DEMO_JUMPS[1].spec.flight_gravity_mps2
    fix = fixed["fix_applied"]
    assert fix["mode"] == "KEEP_CONTACTS" and fix["bone"] == "root"
    assert fix["apex_raise_m"] == pytest.approx((g - g_floaty) * t_s**2 / 8, rel=0.03)
    assert fix["view_height_m"] > fix["apex_raise_m"] + 3.0
    assert demo["fixes"] == {FIXED: fix}


def test_report_has_the_plots_and_the_pictures(demo, tmp_path):
    html = open(demo["report"], encoding="utf-8").read()
    assert f"strip_{FIXED}.png" in html and "flight fixed" in html
    assert "Flight arc before and after the fix" in html and "Spin in flight" in html
    assert "with nothing to push against" in html              # the floaty clip's spin finding
    # Per clip: load, body height with the flight parabola, chain tip swing.
    assert html.count("<svg") >= 3 * len(DEMO_JUMPS)
    for jump in DEMO_JUMPS:
        assert f"strip_{jump.name}.png" in html
        assert jump.name in html
    for chain, _preset, _bones in CHAINS:
        assert chain in html
    assert "plausibility" in html


def test_contact_sheet_is_a_png_of_the_layout_size_with_different_frames(demo):
    tw, th = SMALL["tile"]
    assert tuple(demo["clips"]) == ROWS            # one row per clip, the fixed copy after the floaty one
    lay = SheetLayout(len(ROWS), len(SHEET_EVENTS), tw, th, SMALL["scale"])
    w, h, rgb = read_png(demo["contact_sheet"])
    assert (w, h) == lay.size == tuple(demo["sheet_size"])
    tiles = np.array([[rgb[y:y + th, x:x + tw].astype(float)
                       for x, y in (lay.tile_origin(r, c) for c in range(len(SHEET_EVENTS)))]
                      for r in range(len(ROWS))])
    for r in range(len(ROWS)):
        for c in range(len(SHEET_EVENTS)):
            assert tiles[r, c].std() > 10, "a tile is blank"
            for c2 in range(c + 1, len(SHEET_EVENTS)):
                assert np.abs(tiles[r, c] - tiles[r, c2]).mean() > 1.0, (r, SHEET_EVENTS[c], SHEET_EVENTS[c2])
    # The two apexes differ (the floaty one hangs higher), so do the whips.
    apex, whip = SHEET_EVENTS.index("apex"), SHEET_EVENTS.index("whip")
    assert np.abs(tiles[0, apex] - tiles[1, apex]).mean() > 1.0
    assert np.abs(tiles[0, whip] - tiles[1, whip]).mean() > 0.2
    # The fixed floaty jump: a different apex picture, and the whole body in view at every event
    # (the corrected arc is about 1.3 m higher: the camera is opened up to it). The top rows of a
    # tile are sky only: no part of the character is cut off at the top.
    assert np.abs(tiles[2, apex] - tiles[1, apex]).mean() > 1.0
    for c in range(len(SHEET_EVENTS)):
        top = tiles[2, c][:2]
        assert np.abs(top - top[0, 0]).max() < 8, f"the fixed clip is cut off at {SHEET_EVENTS[c]}"
    # Per-clip strips are one row of the same tiles.
    for name in ROWS:
        sw, sh, _ = read_png(demo["strips"][name])
        assert (sw, sh) == SheetLayout(1, len(SHEET_EVENTS), tw, th, SMALL["scale"]).size


def test_the_blend_reopens_with_both_scenes_and_the_bake_layer(demo):
    bpy.ops.wm.open_mainfile(filepath=str(demo["blend"]), load_ui=False, use_scripts=False)
    assert {j.name for j in DEMO_JUMPS} <= {s.name for s in bpy.data.scenes}
    for jump in DEMO_JUMPS:
        scene = bpy.data.scenes[jump.name]
        rig = next(o for o in scene.objects if o.type == 'ARMATURE')
        track = rig.animation_data.nla_tracks.get("Overlap Bake")
        assert track is not None and len(track.strips) == 1
        assert [c.name for c in rig.overlap_assist.chains] == [c[0] for c in CHAINS]
        assert rig.overlap_assist.body.body_source == 'AUTO'   # the default: CoM when matched
        assert FIX_TRACK_NAME not in [t.name for t in rig.animation_data.nla_tracks]
        assert {"takeoff", "apex", "touchdown"} <= {m.name for m in scene.timeline_markers}
        assert scene.camera is not None and scene.render.engine == 'BLENDER_WORKBENCH'
        assert sum(1 for o in scene.objects if o.type == 'MESH' and o.parent is rig) > 20
        # The chain bones have no keys of their own: their motion comes from the baked layer alone,
        # so the ponytail turns away from its rest pose at the apex and differs at the settle.
        # (Changed with the two-way coupled chain: the ponytail moves as a whole and, weightless
        # in flight, its joint springs bring it back toward its pose by the apex, so the turn is
        # spread over its joints and largest around push-off and landing; the largest joint turn
        # over the contact sheet's frames is checked, no longer the tip bone's at the apex.)
        bpy.context.window.scene = scene
        bpy.context.view_layer.update()   # 4.5 in module mode evaluates a switched-to scene only after this
        bones = [rig.pose.bones[n] for n in CHAINS[0][2]]
        frames = demo["sheet_frames"][jump.name]
        turns = {}
        for event, frame in frames.items():
            scene.frame_set(frame)
            turns[event] = np.array([b.rotation_quaternion for b in bones])
        assert max(2 * np.degrees(np.arccos(min(abs(q[0]), 1.0))) for qs in turns.values() for q in qs) > 5.0
        assert max(np.abs(q - turns["settle"]).max() for q in turns.values()) > 0.02


def test_the_blend_has_the_fixed_copy_with_its_fix_under_the_bake(demo):
    bpy.ops.wm.open_mainfile(filepath=str(demo["blend"]), load_ui=False, use_scripts=False)
    scene = bpy.data.scenes[FIXED]
    rig = next(o for o in scene.objects if o.type == 'ARMATURE')
    assert [t.name for t in rig.animation_data.nla_tracks] == [FIX_TRACK_NAME, "Overlap Bake"]
    assert rig.animation_data.action is not None and rig.animation_data.action_blend_type == 'COMBINE'
    assert scene.camera.data.ortho_scale == pytest.approx(demo["fixes"][FIXED]["view_height_m"], abs=1e-4)


def test_the_demo_command_prints_the_findings_and_writes_the_outputs(tmp_path, capfd):
    from overlap_assist import cli
    assert cli.main(["demo", "--out", str(tmp_path)]) == 0
    out = capfd.readouterr().out
    lines = out.splitlines()
    assert any(line.startswith(f"{FLOATY}:") and "floaty" in line for line in lines)
    assert any(line.startswith(f"{FLOATY}:") and "arm swing after takeoff" in line and "easing yes" in line
               for line in lines)
    assert any(line.startswith(f"{GOOD}:") and "arm swing before takeoff" in line and "easing no" in line
               for line in lines)
    for name in ("overlap_demo.blend", "overlap_demo.json", "overlap_report.html", "contact_sheet.png"):
        assert f"wrote {tmp_path / name}" in out and (tmp_path / name).stat().st_size > 0
    w, h, _ = read_png(tmp_path / "contact_sheet.png")
    tw, th = FULL["tile"]
    assert (w, h) == SheetLayout(len(ROWS), len(SHEET_EVENTS), tw, th, FULL["scale"]).size
    assert any(line.startswith(f"{FIXED}:") and "ballistic" in line for line in lines)
