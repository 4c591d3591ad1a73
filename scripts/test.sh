#!/usr/bin/env bash
# Run every test: tests/core once (numpy 2.x, no Blender), tests/blender inside real Blender
# 4.5 LTS, 5.2 LTS and 5.3. Creates the virtual environments on first use.
#   scripts/test.sh            all versions
#   BLENDER_VERSIONS="5.3" scripts/test.sh   a subset (says which it skipped)
set -uo pipefail
cd "$(dirname "$0")/.."
all=(4.5 5.2 5.3)
read -r -a versions <<< "${BLENDER_VERSIONS:-${all[*]}}"
scripts/setup_env.sh "${versions[@]}" || { echo "test: could not create the environments" >&2; exit 1; }

status=0
core_py=.venv/bpy${versions[-1]}/bin/python
echo "== tests/core ($($core_py -c 'import numpy,sys; print(f"Python {sys.version.split()[0]}, numpy {numpy.__version__}")'))"
$core_py -m pytest -q -p no:cacheprovider tests/core || status=1

for v in "${all[@]}"; do
    if [[ ! " ${versions[*]} " == *" $v "* ]]; then
        echo "== tests/blender on Blender $v: SKIPPED (not in BLENDER_VERSIONS)"
        continue
    fi
    echo "== tests/blender on Blender $v"
    # KILL after 20 min: Blender 4.5 can hang at exit if something stayed registered.
    timeout -s KILL 1200 .venv/bpy$v/bin/python -m pytest -q -p no:cacheprovider tests/blender || status=1
done
exit $status
