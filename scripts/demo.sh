#!/usr/bin/env bash
# Quick start: install what is missing, build, bake the demo scene into out/ and write its
# slice images next to the volumes.
set -euo pipefail
cd "$(dirname "$0")/.."
scripts/setup.sh
[ -d build ] || meson setup build --buildtype=release >/dev/null
ninja -C build >/dev/null
scene=$(ls scenes/*.json | head -n 1)
name=$(python3 -c 'import json,sys; print(json.load(open(sys.argv[1]))["name"])' "$scene")
build/src/cli/brume bake "$scene"
dir="out/$name"
for vol in "$dir"/*.brv; do
  [ -e "$vol" ] || continue
  t=$(basename "$vol" .brv)
  kind=$(build/src/cli/brume info "$vol" --json | python3 -c 'import json,sys; print(json.load(sys.stdin)["grid"])')
  case "$kind" in
    world)
      build/src/cli/brume slice "$vol" --channel inscatter.r,inscatter.g,inscatter.b --axis y --index 4 -o "$dir/$t-inscatter-y4.ppm"
      build/src/cli/brume slice "$vol" --channel inscatter.r,inscatter.g,inscatter.b --axis z --all -o "$dir/$t-inscatter-z.ppm"
      build/src/cli/brume slice "$vol" --channel extinction --axis z --index 64 -o "$dir/$t-extinction-z64.ppm"
      ;;
  esac
done
echo "demo: volumes and slices are in $dir/"
ls -l "$dir"
