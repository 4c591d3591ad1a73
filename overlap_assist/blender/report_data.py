"""Turn analysis and bake results into the report's clip dictionaries (see report.html_report)."""
import numpy as np

from ..core.body_analysis import analysis_to_dict
from ..core.chain_summary import swing_angles
from ..core.effective_gravity import up_axis


def baked_keys_by_chain(obj, sampled, n_frames):
    """Chain name -> (keys a per-frame bake would write, keys written), counted on the bake action."""
    from . import anim_data, bake_layer
    found = bake_layer.find_bake(obj)
    if found is None:
        return {}
    per_bone = {}
    for fc in anim_data.all_action_fcurves(found[2]):
        if fc.data_path.startswith('pose.bones["'):
            bone = fc.data_path.split('"')[1]
            curves, keys = per_bone.get(bone, (0, 0))
            per_bone[bone] = (curves + 1, keys + len(fc.keyframe_points))
    out = {}
    for cname, names in zip(sampled.chain_names, sampled.bone_names):
        curves = sum(per_bone.get(b, (0, 0))[0] for b in names)
        out[cname] = (curves * n_frames, sum(per_bone.get(b, (0, 0))[1] for b in names))
    return out


def clip_dict(name, result, sampled=None, motion=None, keys_by_chain=None, images=None):
    """A report clip from a BodyAnalysis and (optionally) the chains' solve.

    ``keys_by_chain``: chain name -> (keys_before, keys_after), when the chains were baked.
    """
    whole = np.isclose(result.frames, np.round(result.frames))
    height = result.body_pos_m[whole] @ up_axis(result.gravity_mps2)
    clip = {"name": name, "analysis": analysis_to_dict(result),
            "body_height": {"frames": [float(f) for f in result.frames[whole]],
                            "height_m": [float(h) for h in height]},
            "chains": []}
    if sampled is not None and motion is not None:
        for cname, inp, dirs in zip(sampled.chain_names, sampled.inputs, motion.dirs):
            tip = np.degrees(swing_angles(inp.target_dirs, dirs)[:, -1])
            before, after = (keys_by_chain or {}).get(cname, (None, None))
            clip["chains"].append({"chain": cname, "frames": [float(f) for f in sampled.frames],
                                   "tip_swing_deg": [round(float(a), 3) for a in tip],
                                   "keys_before": before, "keys_after": after})
    if images:
        clip["images"] = dict(images)
    return clip
