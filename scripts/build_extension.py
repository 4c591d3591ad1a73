"""Build the installable extension zip: stage the package with the manifest, validate, zip.

    .venv/bpy5.3/bin/python scripts/build_extension.py [--out dist]

Uses Blender's own extension tool (``bl_pkg/cli/blender_ext.py`` inside the bpy wheel), so the
manifest is checked by Blender's validator before the zip is written.
"""
import argparse
import pathlib
import shutil
import subprocess
import sys
import tempfile

ROOT = pathlib.Path(__file__).resolve().parents[1]


def blender_ext_script() -> pathlib.Path:
    found = []
    for entry in sys.path:
        base = pathlib.Path(entry) / "bpy"
        if base.is_dir():
            found += sorted(base.glob("*/scripts/addons_core/bl_pkg/cli/blender_ext.py"))
    if not found:
        sys.exit("build_extension: blender_ext.py not found inside the bpy wheel")
    return found[0]


def stage(dest: pathlib.Path) -> pathlib.Path:
    src = dest / "overlap_assist"
    shutil.copytree(ROOT / "overlap_assist", src, ignore=shutil.ignore_patterns("__pycache__", "*.pyc"))
    shutil.copy(ROOT / "blender_manifest.toml", src / "blender_manifest.toml")
    return src


def run(tool, *args):
    proc = subprocess.run([sys.executable, str(tool), *args], capture_output=True, text=True)
    if proc.returncode != 0:
        sys.exit(f"build_extension: {' '.join(args[:1])} failed:\n{proc.stdout}{proc.stderr}")
    return proc.stdout


def main(argv=None):
    ap = argparse.ArgumentParser()
    ap.add_argument("--out", default=str(ROOT / "dist"))
    args = ap.parse_args(argv)
    tool = blender_ext_script()
    out = pathlib.Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory() as tmp:
        src = stage(pathlib.Path(tmp))
        run(tool, "validate", str(src))
        run(tool, "build", "--source-dir", str(src), "--output-dir", str(out))
    zips = sorted(out.glob("overlap_assist-*.zip"), key=lambda p: p.stat().st_mtime)
    print(zips[-1])
    return 0


if __name__ == "__main__":
    sys.exit(main())
