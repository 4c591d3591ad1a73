"""The manifest passes Blender's own validator, the zip installs, enables and leaves nothing behind."""
import pathlib
import subprocess
import sys
import textwrap

import bpy

import overlap_assist

ROOT = pathlib.Path(__file__).resolve().parents[2]


def test_register_cycle_leaves_nothing_registered():
    overlap_assist.unregister()
    try:
        assert not hasattr(bpy.types.Object, "overlap_assist")
        assert not hasattr(bpy.types, "OVERLAP_ASSIST_OT_analyze_motion")
        assert not any("overlap" in getattr(h, "__module__", "") for hs in
                       (bpy.app.handlers.frame_change_post, bpy.app.handlers.load_post) for h in hs)
    finally:
        overlap_assist.register()
    assert hasattr(bpy.types.Object, "overlap_assist")
    assert "analyze_motion" in dir(bpy.ops.overlap_assist)


def test_build_validate_install_enable_disable(tmp_path):
    built = subprocess.run([sys.executable, str(ROOT / "scripts" / "build_extension.py"), "--out", str(tmp_path)],
                           capture_output=True, text=True, timeout=300)
    assert built.returncode == 0, built.stdout + built.stderr
    zip_path = built.stdout.strip().splitlines()[-1]
    script = textwrap.dedent(f"""
        import os, sys
        os.environ["BLENDER_USER_RESOURCES"] = {str(tmp_path / "user")!r}
        import bpy, addon_utils
        def handlers():
            return sorted(repr(f) for name in dir(bpy.app.handlers) if not name.startswith("_")
                          for f in (getattr(bpy.app.handlers, name) if isinstance(getattr(bpy.app.handlers, name), list) else []))
        before = handlers()
        rc = bpy.ops.extensions.package_install_files(filepath={zip_path!r}, repo='user_default',
                                                      enable_on_install=True)
        assert rc == {{'FINISHED'}}, rc
        mod = "bl_ext.user_default.overlap_assist"
        assert hasattr(bpy.types.Object, "overlap_assist"), "not registered after install"
        assert "analyze_motion" in dir(bpy.ops.overlap_assist)
        addon_utils.disable(mod, default_set=True)
        assert not hasattr(bpy.types.Object, "overlap_assist"), "still registered after disable"
        assert not hasattr(bpy.types, "VIEW3D_PT_overlap_assist_body")
        assert handlers() == before, (before, handlers())
        print("EXTENSION-OK")
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300,
                          env={"PATH": "/usr/bin:/bin", "HOME": str(tmp_path)})
    assert "EXTENSION-OK" in proc.stdout, proc.stdout[-2000:] + proc.stderr[-2000:]
