#!/usr/bin/env bash
# Create the virtual environments the demo and the tests need (idempotent).
#   scripts/setup_env.sh [4.5|5.2|5.3 ...]   (default: all three)
# Each Blender version gets its own venv under .venv/ with the PyPI `bpy` wheel
# (Blender as a Python module), numpy, and the test-only tools (pytest, scipy, hypothesis).
set -euo pipefail
cd "$(dirname "$0")/.."

versions=("$@")
[ ${#versions[@]} -gt 0 ] || versions=(4.5 5.2 5.3)

find_python() {  # $1 = major.minor
    local want=$1 root
    if command -v pyenv >/dev/null 2>&1; then
        root=$(pyenv root)
        for d in "$root"/versions/"$want".*; do
            [ -x "$d/bin/python3" ] && { echo "$d/bin/python3"; return; }
        done
    fi
    command -v "python$want" >/dev/null 2>&1 && { command -v "python$want"; return; }
    return 1
}

for v in "${versions[@]}"; do
    case $v in
        4.5) py=3.11; pins=("bpy==4.5.*" "numpy==1.26.4");;
        5.2) py=3.13; pins=("bpy==5.2.*");;
        5.3) py=3.13; pins=("bpy==5.3.*");;
        *) echo "setup_env: unknown Blender version '$v' (use 4.5, 5.2 or 5.3)" >&2; exit 2;;
    esac
    venv=.venv/bpy$v
    stamp=$venv/.ready
    want="${pins[*]} pytest scipy hypothesis"
    if [ -f "$stamp" ] && [ "$(cat "$stamp")" = "$want" ]; then
        continue
    fi
    python=$(find_python $py) || { echo "setup_env: Python $py not found (needed for Blender $v)" >&2; exit 1; }
    echo "setup_env: creating $venv with $python ($want)" >&2
    rm -rf "$venv"
    "$python" -m venv "$venv"
    "$venv/bin/python" -m pip install -q --disable-pip-version-check "${pins[@]}" pytest scipy hypothesis
    echo "$want" > "$stamp"
done
