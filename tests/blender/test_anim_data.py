"""Reading F-curves in bulk, checked against Blender's own evaluation (``FCurve.evaluate``)."""
import bpy
import numpy as np

from overlap_assist.blender import anim_data


def _curve(bag, index, keys, handle_type="AUTO_CLAMPED", interpolation="BEZIER", extrapolation="CONSTANT"):
    fc = bag.fcurves.new("location", index=index)
    for frame, value in keys:
        kp = fc.keyframe_points.insert(frame, value)
        kp.interpolation = interpolation
        kp.handle_left_type = kp.handle_right_type = handle_type
    fc.extrapolation = extrapolation
    fc.update()
    return fc


def test_bulk_sampling_equals_fcurve_evaluate_bit_for_bit():
    """Every interpolation kind, handle type, fractional key frames, frames outside the keys, both
    extrapolations, a gap in the frames; a curve with a modifier is left to ``evaluate``."""
    bpy.ops.wm.read_factory_settings(use_empty=True)
    act = bpy.data.actions.new("curves")
    slot = act.slots.new(id_type='OBJECT', name="Probe")
    bag = anim_data.channelbag_for(act, slot, create=True)
    keys = [(1.0, 0.0), (4.5, 1.3), (9.25, -0.7), (15.0, 0.2), (22.0, 2.0)]
    curves = [_curve(bag, 0, keys), _curve(bag, 1, keys, "VECTOR"), _curve(bag, 2, keys, "ALIGNED"),
              _curve(bag, 3, keys, interpolation="LINEAR", extrapolation="LINEAR"),
              _curve(bag, 4, keys, interpolation="CONSTANT")]
    free = _curve(bag, 5, keys, "FREE")
    for kp in free.keyframe_points:   # long, crossing handles: Blender shortens them when evaluating
        kp.handle_left = (kp.co[0] - 6.0, kp.co[1] + 3.0)
        kp.handle_right = (kp.co[0] + 9.0, kp.co[1] - 2.0)
    curves.append(free)
    for n, (kind, easing) in enumerate((("BACK", "EASE_IN"), ("ELASTIC", "EASE_OUT"), ("SINE", "EASE_IN_OUT"),
                                        ("BOUNCE", "AUTO"))):
        fc = _curve(bag, 6 + n, keys, interpolation=kind)
        for kp in fc.keyframe_points:
            kp.easing, kp.back, kp.amplitude, kp.period = easing, 2.5, 0.8, 3.0
        curves.append(fc)
    curves.append(_curve(bag, 11, [(5.0, 0.75)]))   # a lone key: constant everywhere
    noisy = _curve(bag, 10, keys)
    noisy.modifiers.new('NOISE')
    other = bpy.data.actions.new("other")   # curves of a second action in the same call
    other_bag = anim_data.channelbag_for(other, other.slots.new(id_type='OBJECT', name="Other"), create=True)
    curves.append(_curve(other_bag, 0, [(2.0, 5.0), (8.0, -1.0)], "VECTOR", extrapolation="LINEAR"))
    frames = np.concatenate((np.arange(-3, 12), np.arange(14, 30)))
    counts = [len(fc.keyframe_points) for fc in curves]

    sampled = anim_data.sample_fcurves(curves + [noisy], frames)

    assert noisy not in sampled and set(sampled) == set(curves)
    for fc in curves:
        expected = np.array([fc.evaluate(float(f)) for f in frames], dtype=np.float32)
        np.testing.assert_array_equal(sampled[fc], expected)
    assert sorted(a.name for a in bpy.data.actions) == ["curves", "other"]            # temporary copies gone
    assert [len(fc.keyframe_points) for fc in curves] == counts                        # sources untouched
