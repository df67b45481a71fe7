"""brume bake: up-to-date decisions by content, re-baking exactly what a change affects, --force,
the output layout for one and several scenes, folders, and bytes that do not depend on -j."""
import os
import shutil

from clitest import (check, check_eq, file_bytes, listing, main, read_report, run, statuses,
                     tiny_scene, write_scene)

CRATE = """# a closed unit crate, counter-clockwise seen from outside
v 0 0 0
v 1 0 0
v 1 1 0
v 0 1 0
v 0 0 1
v 1 0 1
v 1 1 1
v 0 1 1
f 1 4 3
f 1 3 2
f 5 6 7
f 5 7 8
f 1 2 6
f 1 6 5
f 4 8 7
f 4 7 3
f 1 5 8
f 1 8 4
f 2 3 7
f 2 7 6
"""


def body(tmp):
    os.makedirs(os.path.join(tmp, "meshes"))
    mesh = os.path.join(tmp, "meshes", "crate.obj")
    with open(mesh, "w") as f:
        f.write(CRATE)
    scene = tiny_scene()
    scene["geometry"].append({"shape": "mesh", "path": "meshes/crate.obj", "translate": [4, 0, 4]})
    sp = os.path.join(tmp, "yard.json")
    write_scene(sp, scene)
    out = os.path.join(tmp, "out1")
    rep = os.path.join(tmp, "report.json")

    def bake(*extra):
        return run(["bake", sp, "-o", out, "--report", rep] + list(extra))

    rc, so, se = bake("-j", "2")
    check_eq(rc, 0, "first bake exits 0")
    check_eq(statuses(rep), {"west": "baked", "east": "baked"}, "first bake bakes both targets")
    check_eq(listing(out), ["east.brv", "west.brv"], "one scene with -o: DIR/<target>.brv, nothing else")
    by, _ = read_report(rep)
    w = by[("yard", "west")]
    check_eq(w["cells"], 16 ** 3, "report gives the cell count")
    check_eq(w["output"], os.path.join(out, "west.brv"), "report gives the output path")
    check_eq(w["bytes"], os.path.getsize(os.path.join(out, "west.brv")), "report gives the file size")
    check(w["seconds"] > 0 and w["error"] is None and w["warnings"] == [], "report: seconds, no error")
    check("baked" in so and "yard/west" in so, "per-target lines on stdout", so)
    first = {n: file_bytes(os.path.join(out, n)) for n in ("west.brv", "east.brv")}

    rc, so, se = bake()
    check_eq(rc, 0, "re-bake exits 0")
    check_eq(statuses(rep), {"west": "up-to-date", "east": "up-to-date"}, "re-bake: all up to date")
    check(all(file_bytes(os.path.join(out, n)) == b for n, b in first.items()), "re-bake leaves files alone")
    check("0 baked, 2 up to date, 0 failed" in se, "summary counts up-to-date targets", se)

    # New timestamps, same bytes: still up to date (content decides, not time).
    os.utime(sp)
    os.utime(mesh)
    bake()
    check_eq(statuses(rep), {"west": "up-to-date", "east": "up-to-date"}, "touching files re-bakes nothing")

    def edit(fn):
        fn(scene)
        write_scene(sp, scene)
        rc, _, se = bake()
        check_eq(rc, 0, "bake after an edit exits 0", se)
        return statuses(rep)

    # lights[2] is a point light of range 4 m beside the east target only.
    st = edit(lambda s: s["lights"][2].update(intensity_cd=140))
    check_eq(st, {"west": "up-to-date", "east": "baked"}, "a light near east re-bakes only east")
    st = edit(lambda s: s["lights"][1].update(color=[1, 0.9, 0.8]))
    check_eq(st, {"west": "baked", "east": "up-to-date"}, "a light near west re-bakes only west")
    st = edit(lambda s: s["lights"][0].update(illuminance_lux=1200))
    check_eq(st, {"west": "baked", "east": "baked"}, "the directional light re-bakes both")
    # A new light that reaches neither target: nothing to re-bake.
    st = edit(lambda s: s["lights"].append({"type": "point", "position": [14, 3, 3], "intensity_cd": 50,
                                            "range_m": 2}))
    check_eq(st, {"west": "up-to-date", "east": "up-to-date"}, "a light reaching no target re-bakes nothing")
    st = edit(lambda s: s["media"][0].update(visibility_m=80))
    check_eq(st, {"west": "baked", "east": "baked"}, "a medium change re-bakes both")
    st = edit(lambda s: s["targets"][1].update(samples=2))
    check_eq(st, {"west": "up-to-date", "east": "baked"}, "a target's settings re-bake only that target")
    st = edit(lambda s: s["targets"][0].update(encoding="f32"))
    check_eq(st, {"west": "baked", "east": "up-to-date"}, "a target's encoding re-bakes only that target")

    # The mesh's bytes change, its timestamp does not.
    before = os.stat(mesh)
    with open(mesh, "w") as f:
        f.write(CRATE.replace("v 1 1 1", "v 1 1.2 1"))
    os.utime(mesh, ns=(before.st_atime_ns, before.st_mtime_ns))
    check_eq(os.stat(mesh).st_mtime_ns, before.st_mtime_ns, "mesh timestamp restored")
    bake()
    check_eq(statuses(rep), {"west": "baked", "east": "baked"}, "new mesh bytes, same timestamp: re-baked")

    now = {n: file_bytes(os.path.join(out, n)) for n in ("west.brv", "east.brv")}
    rc, _, _ = bake("--force", "-j", "1")
    check_eq(statuses(rep), {"west": "baked", "east": "baked"}, "--force re-bakes up-to-date targets")
    check(all(file_bytes(os.path.join(out, n)) == b for n, b in now.items()),
          "a forced re-bake on 1 thread gives the same bytes as on 2")

    rc, _, _ = bake("--target", "east")
    by, _ = read_report(rep)
    check_eq(list(by), [("yard", "east")], "--target bakes and reports only the named target")
    rc, _, se = run(["bake", sp, "-o", out, "--target", "nowhere"])
    check(rc == 2 and "nowhere" in se, "--target with an unknown name is a usage error", se)

    # Several scenes: DIR/<scene name>/<target>.brv, and a folder stands for its scenes.
    folder = os.path.join(tmp, "levels")
    os.makedirs(os.path.join(folder, "more"))
    shutil.copytree(os.path.join(tmp, "meshes"), os.path.join(folder, "meshes"))
    shutil.copytree(os.path.join(tmp, "meshes"), os.path.join(folder, "more", "meshes"))
    write_scene(os.path.join(folder, "yard.json"), scene)
    court = tiny_scene(name="court")
    write_scene(os.path.join(folder, "more", "court.json"), court)
    with open(os.path.join(folder, "notes.json"), "w") as f:
        f.write('{"targets": []}\n')   # JSON but not a scene: skipped in folders
    out2 = os.path.join(tmp, "out2")
    rc, so, se = run(["bake", folder, os.path.join(folder, "yard.json"), "-o", out2, "--report", rep])
    check_eq(rc, 0, "folder bake exits 0", se)
    check_eq(listing(out2), ["court/east.brv", "court/west.brv", "yard/east.brv", "yard/west.brv"],
             "several scenes: DIR/<scene>/<target>.brv; a scene named twice bakes once")
    by, _ = read_report(rep)
    check_eq(sorted(by), [("court", "east"), ("court", "west"), ("yard", "east"), ("yard", "west")],
             "report names each scene's targets")
    # The hash names meshes relative to the scene's folder: the copy in another folder, baked
    # into the first output folder, finds those outputs up to date.
    rc, _, _ = run(["bake", os.path.join(folder, "yard.json"), "-o", out, "--report", rep])
    check_eq(statuses(rep), {"west": "up-to-date", "east": "up-to-date"},
             "the same scene and meshes in another folder are up to date")

    # Default folders: out/<scene name>/ for one scene, out/<scene name>/ under out/ for several.
    cwd = os.path.join(tmp, "cwd")
    os.makedirs(cwd)
    rc, _, se = run(["bake", sp, "--target", "west"], cwd=cwd)
    check(rc == 0 and os.path.isfile(os.path.join(cwd, "out", "yard", "west.brv")),
          "one scene without -o goes to out/<scene name>/", se)

    # Two scenes of one name would write to the same folder: refused with both files named.
    twin = dict(court)
    twin["name"] = "yard"
    tp = os.path.join(folder, "more", "twin.json")
    write_scene(tp, twin)
    rc, _, se = run(["bake", os.path.join(folder, "yard.json"), tp, "-o", os.path.join(tmp, "out3")])
    check(rc == 1 and "twin.json" in se and "yard.json" in se and "name" in se,
          "two scenes of one name: exit 1 naming both", se)
    os.remove(tp)

    # Probes gather bounce light from anywhere: a light that reaches fog or geometry anywhere
    # counts for them, even when it misses their box.
    ps = tiny_scene(name="lattice", extra_targets=[
        {"name": "probes", "grid": "probes", "min": [0.5, 0.5, 0.5], "max": [5.5, 5.5, 5.5],
         "spacing_m": 2.5, "rays": 32}])
    pp = os.path.join(tmp, "lattice.json")
    pout = os.path.join(tmp, "out-lattice")
    write_scene(pp, ps)
    rc, _, se = run(["bake", pp, "-o", pout, "--report", rep])
    check_eq(statuses(rep), {"west": "baked", "east": "baked", "probes": "baked"}, "probe scene: first bake", se)
    ps["lights"][2]["intensity_cd"] = 150
    write_scene(pp, ps)
    run(["bake", pp, "-o", pout, "--report", rep])
    check_eq(statuses(rep), {"west": "up-to-date", "east": "baked", "probes": "baked"},
             "a light far from the probes but inside the fog re-bakes them")
    ps["lights"].append({"type": "point", "position": [14, 3, 3], "intensity_cd": 50, "range_m": 0.5})
    ps["fog_bounds"] = {"min": [0, 0, 0], "max": [12, 6, 6]}
    ps["geometry"] = [{"shape": "box", "min": [2, 0, 2], "max": [3, 2, 3]}]
    write_scene(pp, ps)
    run(["bake", pp, "-o", pout, "--report", rep])
    st1 = statuses(rep)
    ps["lights"][3]["intensity_cd"] = 70
    write_scene(pp, ps)
    run(["bake", pp, "-o", pout, "--report", rep])
    check_eq(statuses(rep), {"west": "up-to-date", "east": "up-to-date", "probes": "up-to-date"},
             "a light outside the fog, far from all geometry, re-bakes nothing", str(st1))

    empty = os.path.join(tmp, "empty")
    os.makedirs(empty)
    rc, _, se = run(["bake", empty, "-o", os.path.join(tmp, "out4")])
    check(rc == 1 and empty in se and "no scene" in se, "a folder without scenes is an error naming it", se)


main(body)
