"""The core must import without Blender: no bpy, mathutils or bpy_extras in sys.modules."""
import pathlib
import subprocess
import sys

ROOT = pathlib.Path(__file__).resolve().parents[2]


def test_core_imports_without_blender_modules():
    modules = sorted(p.stem for p in (ROOT / "overlap_assist" / "core").glob("*.py") if p.stem != "__init__")
    assert modules, "core has no modules"
    code = (
        "import sys, importlib\n"
        f"for m in {modules!r}:\n"
        "    importlib.import_module('overlap_assist.core.' + m)\n"
        "bad = [m for m in ('bpy', 'mathutils', 'bpy_extras') if m in sys.modules]\n"
        "print(','.join(bad))\n"
    )
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "", f"core pulled in Blender modules: {out.stdout.strip()}"


def test_core_sources_do_not_name_blender_modules():
    for path in (ROOT / "overlap_assist" / "core").glob("*.py"):
        for line in path.read_text().splitlines():
            stripped = line.strip()
            if stripped.startswith(("import ", "from ")):
                assert not any(w in stripped for w in ("bpy", "mathutils")), f"{path.name}: {stripped}"
