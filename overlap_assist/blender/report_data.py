"""Turn analysis and bake results into the report's clip dictionaries (see report.html_report)."""
import numpy as np

from ..core.body_analysis import analysis_to_dict
from ..core.chain_summary import swing_angles
from ..core.effective_gravity import up_axis


def baked_keys_by_chain(obj, sampled, n_frames):
    """Chain name -> (keys a per-frame bake would write, keys written), counted on the bake action
    on the bones each chain's keys go on (``rig_drive.key_bones``: the controls that drive a
    constrained chain, e.g. Rigify's FK controls, else the chain's own bones)."""
    from . import anim_data, bake_layer, rig_drive
    found = bake_layer.find_bake(obj)
    if found is None:
        return {}
    written = {}
    for fc in anim_data.all_action_fcurves(found[2]):
        if fc.data_path.startswith('pose.bones["'):
            bone = fc.data_path.split('"')[1]
            written[bone] = written.get(bone, 0) + len(fc.keyframe_points)
    pose = obj.pose.bones
    out = {}
    for cname, names in zip(sampled.chain_names, sampled.bone_names):
        keyed = [b for b in rig_drive.key_bones(obj, names) if b in pose]
        channels = sum(4 if pose[b].rotation_mode == 'QUATERNION' else 3 for b in keyed)
        out[cname] = (channels * n_frames, sum(written.get(b, 0) for b in keyed))
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
