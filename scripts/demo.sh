#!/usr/bin/env bash
# Quick start: install what is missing, build, bake the demo scene into out/ and write its
# slice images and preview pictures next to the volumes.
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
  # A picture of the bake over the scene: frustum targets from their own camera, world and
  # probe targets from a corner of their box looking across it (with its fog-free twin).
  case "$kind" in
    frustum)
      build/src/cli/brume preview "$scene" --target "$t" --volume "$vol" -o "$dir/$t-preview.ppm"
      ;;
    world|probes)
      cam=$(build/src/cli/brume info "$vol" --json | python3 -c '
import json, sys
b = json.load(sys.stdin)["bounds"]; lo, hi = b["min"], b["max"]; s = [h - l for l, h in zip(lo, hi)]
f = [lo[0] + 0.08 * s[0], lo[1] + 0.35 * s[1], lo[2] + 0.1 * s[2]]
a = [hi[0] - 0.2 * s[0], lo[1] + 0.2 * s[1], hi[2] - 0.25 * s[2]]
print("%g,%g,%g %g,%g,%g" % tuple(f + a))')
      build/src/cli/brume preview "$scene" --target "$t" --volume "$vol" --from "${cam% *}" --look-at "${cam#* }" \
        -o "$dir/$t-preview.ppm"
      ;;
  esac
done
echo "demo: volumes, slices and previews are in $dir/"
ls -l "$dir"
