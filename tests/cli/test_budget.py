"""brume bake --max-memory: a target whose estimated peak memory is over the budget fails with
exit 3 and a message giving the cell count that would fit, writes no file, and the other
targets still bake (unless --fail-fast). The cell count in the message is checked against the
estimate that `brume check` prints for a target of that size."""
import os
import re

from clitest import check, check_eq, listing, main, read_report, run, tiny_scene, write_scene

BIG = [128, 128, 128]


def estimates(scene_path):
    """Target name → estimated memory in bytes, from `brume check -j 1`."""
    rc, so, se = run(["check", scene_path, "-j", "1"])
    check_eq(rc, 0, "check exits 0", se)
    est = {}
    for m in re.finditer(r'target "([^"]+)": .*?estimated memory ([\d.]+) MiB', so):
        est[m.group(1)] = float(m.group(2)) * 1048576.0
    return est


def body(tmp):
    scene = tiny_scene()
    scene["targets"][0]["name"] = "big"
    scene["targets"][0]["cells"] = BIG
    scene["targets"][1]["name"] = "small"
    sp = os.path.join(tmp, "yard.json")
    write_scene(sp, scene)
    est = estimates(sp)
    check("big" in est and "small" in est and est["big"] > est["small"] + 8 * 1048576,
          "check estimates both targets, the big one well above the small one", str(est))
    budget = int((est["big"] + est["small"]) / 2)
    out = os.path.join(tmp, "out")
    rep = os.path.join(tmp, "report.json")

    rc, so, se = run(["bake", sp, "-o", out, "-j", "1", "--max-memory", str(budget), "--report", rep])
    check_eq(rc, 3, "over the budget: exit 3", se)
    check_eq(listing(out), ["small.brv"], "no file for the refused target; the other one baked")
    m = re.search(r'about (\d+) cells would fit \(this target has (\d+)\), e\.g\. "cells": \[(\d+), (\d+), (\d+)\]', se)
    check(m is not None and "--max-memory" in se and "yard.json" in se and "targets[0]" in se,
          "the message names the place, the cells that would fit and the option", se)
    by, _ = read_report(rep)
    big, small = by[("yard", "big")], by[("yard", "small")]
    check(big["status"] == "failed" and big["output"] is None and "would fit" in (big["error"] or ""),
          "report: the big target failed with the message", str(big))
    check_eq(small["status"], "baked", "report: the small target baked")
    if m:
        fit = int(m.group(1))
        cells = [int(m.group(k)) for k in (3, 4, 5)]
        check_eq(int(m.group(2)), BIG[0] * BIG[1] * BIG[2], "the message gives the target's cells")
        check(16 ** 3 < fit < BIG[0] * BIG[1] * BIG[2], "the cells that would fit lie between the sizes", str(fit))
        check_eq(cells[0] * cells[1] * cells[2], fit, "the suggested cells hold that many cells")
        # The suggestion is estimated within the budget, and a few percent more is not.
        fp = os.path.join(tmp, "fit.json")
        scene["targets"][0]["cells"] = cells
        write_scene(fp, scene)
        e_fit = estimates(fp).get("big", 1e30)
        scene["targets"][0]["cells"] = [int(c * 1.05) + 1 for c in cells]
        write_scene(fp, scene)
        e_more = estimates(fp).get("big", -1)
        # `check` prints the estimate to 0.1 MiB, so a printed value is the true one within 0.05 MiB.
        half = 0.05 * 1048576.0
        check(e_fit - half <= budget < e_more - half, "the suggested cells fit the budget; 5 % more on each axis do not",
              "%.0f, %d, %.0f" % (e_fit, budget, e_more))

    # --fail-fast: nothing starts after the refusal (one thread: input order).
    out2 = os.path.join(tmp, "out2")
    rc, so, se = run(["bake", sp, "-o", out2, "-j", "1", "--max-memory", str(budget), "--report", rep,
                      "--fail-fast"])
    check_eq(rc, 3, "--fail-fast: exit 3")
    check(not os.path.exists(out2) or listing(out2) == [], "--fail-fast: no output at all")
    by, _ = read_report(rep)
    s2 = by[("yard", "small")]
    check(s2["status"] == "failed" and "not started" in (s2["error"] or ""),
          "--fail-fast: the later target is reported as not started", str(s2))

    rc, _, se = run(["bake", sp, "-o", out2, "--max-memory", "lots"])
    check(rc == 2 and "--max-memory" in se, "a bad --max-memory is a usage error", se)
    rc, _, se = run(["bake", sp, "-o", out2, "--max-memory", "64K"])
    check(rc == 3 and se.count("over the budget of 0.1 MiB; even the smallest grid is over it") == 2,
          "a K suffix is understood: 64K refuses both targets, saying nothing smaller would fit", se)


main(body)
