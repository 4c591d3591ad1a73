"""Helpers shared by the Blender-side tests (imported by name: pytest puts this folder on sys.path)."""
import hashlib
import pathlib
import subprocess
import sys
import textwrap

import bpy

ROOT = pathlib.Path(__file__).resolve().parents[2]


def action_digest(action, path_prefix=""):
    """Hash of every key (co, handles, interpolation, handle types, easing...) of the F-curves of
    ``action`` whose data path starts with ``path_prefix``: equal digests, byte-identical keys."""
    from overlap_assist.blender import anim_data
    h = hashlib.sha256()
    for fc in sorted(anim_data.all_action_fcurves(action), key=lambda c: (c.data_path, c.array_index)):
        if not fc.data_path.startswith(path_prefix):
            continue
        h.update(fc.data_path.encode() + bytes([fc.array_index]))
        for name, arr in anim_data.read_keyframes(fc).items():
            h.update(name.encode() + arr.tobytes())
    return h.hexdigest()


def op(obj, name, **kw):
    """Run ``bpy.ops.overlap_assist.<name>`` with ``obj`` active."""
    with bpy.context.temp_override(active_object=obj, object=obj):
        return getattr(bpy.ops.overlap_assist, name)(**kw)


def select_bones(obj, names):
    """Select exactly ``names`` among the pose bones (PoseBone.select in 5.x, Bone.select in 4.5)."""
    for pb in obj.pose.bones:
        flag = pb.name in names
        if hasattr(pb, "select"):
            pb.select = flag
        else:
            obj.data.bones[pb.name].select = flag


def run_cli(*args, timeout=900):
    """``python -m overlap_assist ...`` in a fresh process; returns CompletedProcess."""
    return subprocess.run([sys.executable, "-m", "overlap_assist", *args], cwd=ROOT, capture_output=True,
                          text=True, timeout=timeout)


def make_malicious_blend(blend, marker):
    """Save a jump rig with a registered text block and a Python-expression driver that would each
    write ``marker``. Authored in another process; the marker is deleted afterwards in case that
    process evaluated the driver, so only a later run can create it."""
    make = textwrap.dedent(f"""
        import bpy, sys
        sys.path.insert(0, {str(ROOT)!r})
        from overlap_assist.blender.demo_scene import build_armature, key_jump
        obj = build_armature("Hero")
        key_jump(obj)
        txt = bpy.data.texts.new("boot.py")
        txt.write("open({str(marker)!r}, 'w').write('text block ran')\\n")
        txt.use_module = True
        obj["x"] = 0.0
        fc = obj.driver_add('["x"]')
        fc.driver.type = 'SCRIPTED'
        fc.driver.expression = "__import__('builtins').open({str(marker)!r}, 'w').write('driver ran') or 0"
        bpy.ops.wm.save_as_mainfile(filepath={str(blend)!r})
        bpy.ops.wm.read_factory_settings(use_empty=True)
    """)
    subprocess.run([sys.executable, "-c", make], check=True, capture_output=True, timeout=300)
    pathlib.Path(marker).unlink(missing_ok=True)
    return str(blend)
