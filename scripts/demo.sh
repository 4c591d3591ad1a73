#!/usr/bin/env bash
# The main job on built-in demo data: build our demo character and jumps, analyse them, and
# write out/demo/overlap_demo.blend and out/demo/overlap_demo.json. Creates its environment.
set -euo pipefail
cd "$(dirname "$0")/.."
version=${BLENDER_VERSION:-5.3}
scripts/setup_env.sh "$version"
exec ".venv/bpy$version/bin/python" -m overlap_assist demo --out "${1:-out/demo}"
