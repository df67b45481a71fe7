"""Warnings for legal but suspicious scenes, printed by `brume check` and by `brume bake` (on
stderr and in the report), each naming its place: a light that reaches no target, a target
with no fog, shadow-map texels larger than the cells, a target mostly inside solid geometry,
and too few samples for the cell size (the rules are documented in src/bake/warnings.h; the
sample rule is common practice, no source). A clean scene gets none."""
import os

from clitest import check, check_eq, main, read_report, run, tiny_scene, write_scene


def warnings_of(tmp, scene, name):
    """(check stdout, bake stderr, report entries) for a scene."""
    sp = os.path.join(tmp, name + ".json")
    write_scene(sp, scene)
    rc, so, se = run(["check", sp])
    check_eq(rc, 0, name + ": check exits 0 (warnings do not fail)", se)
    rep = os.path.join(tmp, name + "-report.json")
    rc2, _, se2 = run(["bake", sp, "-o", os.path.join(tmp, "out-" + name), "--report", rep])
    check_eq(rc2, 0, name + ": bake exits 0 (warnings do not fail)", se2)
    by, _ = read_report(rep)
    return so, se2, by


def body(tmp):
    so, se, by = warnings_of(tmp, tiny_scene(name="clean"), "clean")
    check("warning" not in so and "warning" not in se, "a clean scene: no warning", so + se)
    check(all(t["warnings"] == [] for t in by.values()), "a clean scene: no warning in the report")

    # A light whose range reaches neither target.
    s = tiny_scene(name="stray")
    s["lights"].append({"type": "point", "position": [14, 3, 3], "intensity_cd": 50, "range_m": 2})
    so, se, by = warnings_of(tmp, s, "stray")
    msg = "lights[3]: the light reaches none of the 2 target(s)"
    check(msg in so, "stray light: check warns, naming lights[3]", so)
    check(msg in se and "warning" in se, "stray light: bake warns on stderr", se)
    check(all(any(msg in w for w in t["warnings"]) for t in by.values()),
          "stray light: every target's report entry carries the scene's warning")

    # Fog only around the west target.
    s = tiny_scene(name="patchy", media=[{"type": "box", "min": [0, 0, 0], "max": [6, 6, 6],
                                           "extinction_per_m": 0.05}])
    so, se, by = warnings_of(tmp, s, "patchy")
    check('targets[1] ("east"): no fog anywhere inside the target' in so, "no fog: check warns for east", so)
    check('targets[0] ("west")' not in so, "no fog: nothing about west, which has fog", so)
    check(any("no fog" in w for w in by[("patchy", "east")]["warnings"]) and
          by[("patchy", "west")]["warnings"] == [], "no fog: in east's report entry only")

    # A spot whose map is forced coarse (16 texels) over 0.375 m cells.
    s = tiny_scene(name="coarse-map")
    s["lights"].append({"type": "spot", "position": [3, 5.9, 3], "direction": [0, -1, 0], "inner_deg": 30,
                        "outer_deg": 50, "intensity_cd": 200, "range_m": 8, "shadow": {"resolution": 16}})
    so, se, by = warnings_of(tmp, s, "coarse-map")
    check('targets[0] ("west"): the shadow map of lights[3] has texels of' in so and "larger than the" in so,
          "coarse map: check warns, naming the light and the target", so)
    check(any("lights[3].shadow.resolution" in w for w in by[("coarse-map", "west")]["warnings"]),
          "coarse map: the report says what to raise")

    # The east target buried in a solid block.
    s = tiny_scene(name="buried")
    s["geometry"].append({"shape": "box", "min": [21, -1, -1], "max": [29, 7, 7]})
    so, se, by = warnings_of(tmp, s, "buried")
    check('targets[1] ("east"): the target is mostly inside solid geometry (100 % of sampled points)' in so,
          "buried: check warns with the fraction", so)
    check(not any("solid" in w for w in by[("buried", "west")]["warnings"]), "buried: west is not")

    # One sample per 2 m cell; two samples per elongated 1 m x 0.375 m cell.
    s = tiny_scene(name="sparse")
    s["targets"][0].update(cells=[3, 3, 3], samples=1)
    s["targets"][1].update(cells=[6, 16, 6], samples=2)
    so, se, by = warnings_of(tmp, s, "sparse")
    check('targets[0] ("west"): 1 sample(s) per cell with cells up to 2 m' in so,
          "sparse: 1 sample in 2 m cells warns", so)
    check('targets[1] ("east"): 2 sample(s) per cell with cells up to 1 m, larger than the' in so,
          "sparse: 2 samples in cells spanning over 2 shadow texels warns", so)
    s["targets"][0].update(samples=4)
    s["targets"][1].update(samples=4)
    so, _, _ = warnings_of(tmp, s, "dense")
    check("sample(s) per cell" not in so, "4 samples: no sample warning", so)


main(body)
