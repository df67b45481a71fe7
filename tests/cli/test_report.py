"""brume bake --report with failures: every target has an entry with every key, a failing scene
or target does not stop the others, the exit status is that of the first failure in input
order, and the report is written (into a new folder if need be) even when targets fail."""
import os

from clitest import check, check_eq, listing, main, read_report, run, tiny_scene, write_scene

KEYS = ["scene", "name", "status", "seconds", "cells", "output", "bytes", "warnings", "error"]


def body(tmp):
    good = tiny_scene(name="good")
    gp = os.path.join(tmp, "good.json")
    write_scene(gp, good)
    broken = os.path.join(tmp, "broken.json")
    with open(broken, "w") as f:
        f.write('{\n  "brume": 1,\n  "name": "broken",\n  "targets": [\n')   # truncated
    heavy = tiny_scene(name="heavy")
    heavy["targets"][0]["cells"] = [128, 128, 128]
    hp = os.path.join(tmp, "heavy.json")
    write_scene(hp, heavy)
    out = os.path.join(tmp, "out")
    rep = os.path.join(tmp, "reports", "nested", "bake.json")

    budget = str(40 << 20)
    rc, so, se = run(["bake", broken, hp, gp, "-o", out, "--report", rep, "-j", "1", "--max-memory", budget])
    check_eq(rc, 1, "a broken scene first: the exit status is its 1", se)
    check(os.path.isfile(rep), "the report is written into a new folder although targets failed")
    by, doc = read_report(rep)
    check_eq(len(doc["targets"]), 5, "one entry for the broken scene and one per target of the others")
    check(all(list(t) == KEYS for t in doc["targets"]), "every entry has every key, in order",
          str([list(t) for t in doc["targets"]]))
    b = doc["targets"][0]
    check(b["scene"] == broken and b["name"] is None and b["status"] == "failed" and "broken.json:" in b["error"],
          "the broken scene's entry names its file and gives the error with a place", str(b))
    check_eq(by[("heavy", "west")]["status"], "failed", "the target over the budget failed")
    check_eq([by[k]["status"] for k in (("heavy", "east"), ("good", "west"), ("good", "east"))],
             ["baked"] * 3, "the other targets still baked")
    check_eq(listing(out), ["good/east.brv", "good/west.brv", "heavy/east.brv"], "outputs of the good targets only")
    check("broken.json:" in se and "would fit" in se, "both errors on stderr", se)
    check("3 baked, 0 up to date, 2 failed" in se, "the summary counts the failures", se)
    check(not [n for n in os.listdir(os.path.dirname(rep)) if n.startswith(".")], "no temporary report left")

    rc, _, se = run(["bake", hp, broken, gp, "-o", out, "--report", rep, "-j", "1", "--max-memory", budget])
    check_eq(rc, 3, "the budget failure first: the exit status is its 3", se)
    st = [t["status"] for t in read_report(rep)[1]["targets"]]
    check_eq(st, ["failed", "up-to-date", "failed", "up-to-date", "up-to-date"],
             "report order follows the input order")

    rc, _, se = run(["bake", gp, "-o", out, "--report", rep])
    check_eq(rc, 0, "all good: exit 0")

    # An output folder that cannot be made: an I/O failure (3), and the report still written.
    blocker = os.path.join(tmp, "blocker")
    with open(blocker, "w") as f:
        f.write("a file where a folder should go\n")
    rc, _, se = run(["bake", gp, "-o", os.path.join(blocker, "sub"), "--report", rep, "--force"])
    check(rc == 3 and "blocker" in se, "an output folder that cannot be made: exit 3 naming it", se)
    check_eq([t["status"] for t in read_report(rep)[1]["targets"]], ["failed", "failed"],
             "both targets reported failed")

    rc, _, se = run(["bake", gp, "-o", out, "--bogus"])
    check(rc == 2 and "--bogus" in se, "an unknown option is a usage error", se)
    rc, _, se = run(["bake"])
    check(rc == 2 and "no scene" in se, "no scene is a usage error", se)
    rc, _, se = run(["bake", gp, "-o", out, "-j", "0"])
    check(rc == 2 and "-j" in se, "-j 0 is a usage error", se)
    rc, _, se = run(["bake", gp, "-o", out, "-j2"])
    check_eq(rc, 0, "-j2 (attached) is understood", se)
    rc, so, _ = run(["bake", "--help"])
    check(rc == 0 and "--max-memory" in so and "Exit status" in so, "--help describes the options and exits 0")


main(body)
