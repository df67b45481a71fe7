"""brume bake interrupted by SIGINT or SIGTERM: the workers stop within a second, the previous
output stays byte for byte, no temporary file is left, the report is written with the target
in progress `interrupted`, and the exit status is 3. A second signal exits at once, also
leaving no temporary file."""
import os
import signal
import subprocess
import time

import clitest
from clitest import check, check_eq, file_bytes, listing, main, read_report, run, tiny_scene, write_scene

# A world target that bakes for several seconds here (a sky and 8 samples on 1M cells: about
# 3.5 s on two cores in a plain build, the baker having become faster). It is interrupted once
# its temporary output file exists (about half a second in), so the signal lands while bricks
# are being written.
BIG_CELLS = [128, 64, 128]


def wait_for_temporary(folder, p, limit=20.0):
    t = time.monotonic()
    while time.monotonic() - t < limit and p.poll() is None:
        if any(n.startswith(".") and ".tmp." in n for n in os.listdir(folder)):
            return True
        time.sleep(0.02)
    return False


def body(tmp):
    scene = tiny_scene()
    scene["sky"] = {"zenith": [100, 120, 160], "horizon": [80, 80, 80], "ground": [10, 10, 10]}
    scene["targets"][0]["samples"] = 8
    sp = os.path.join(tmp, "yard.json")
    out = os.path.join(tmp, "out")
    rep = os.path.join(tmp, "report.json")
    write_scene(sp, scene)
    rc, _, se = run(["bake", sp, "-o", out])
    check_eq(rc, 0, "the small first bake exits 0", se)
    previous = {n: file_bytes(os.path.join(out, n)) for n in ("west.brv", "east.brv")}

    # The same target, now big: its inputs changed, so it bakes again (for a while).
    # The small east target changes too: it waits behind west and never starts.
    scene["targets"][0]["cells"] = BIG_CELLS
    scene["targets"][1]["samples"] = 2
    write_scene(sp, scene)

    for sig, name in ((signal.SIGINT, "SIGINT"), (signal.SIGTERM, "SIGTERM")):
        if os.path.exists(rep):
            os.remove(rep)
        env = dict(os.environ)
        env.pop("NO_COLOR", None)
        p = subprocess.Popen([clitest.BRUME, "bake", sp, "-o", out, "-j", "2", "--report", rep],
                             stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
        started = time.monotonic()
        check(wait_for_temporary(out, p), name + ": the bake writes a temporary file beside the output")
        time.sleep(max(0.1, started + 0.5 - time.monotonic()))
        check(p.poll() is None, name + ": the big bake is still running")
        t = time.monotonic()
        p.send_signal(sig)
        so, se = p.communicate(timeout=60)
        latency = time.monotonic() - t
        print("      %s: exited %.3f s after the signal" % (name, latency))
        check(latency < 1.0, name + ": stops within a second", "%.3f s" % latency)
        check_eq(p.returncode, 3, name + ": exit status 3", se)
        check_eq(listing(out), ["east.brv", "west.brv"], name + ": no temporary file left")
        check(all(file_bytes(os.path.join(out, n)) == b for n, b in previous.items()),
              name + ": the previous outputs are byte-identical")
        check(os.path.isfile(rep), name + ": the report is written")
        if os.path.isfile(rep):
            by, _ = read_report(rep)
            w = by.get(("yard", "west"), {})
            check_eq(w.get("status"), "interrupted", name + ": the target in progress is reported interrupted")
            check(w.get("output") is None and "interrupted" in (w.get("error") or ""),
                  name + ": no output and an error saying so", str(w))
            check_eq(by.get(("yard", "east"), {}).get("status"), "interrupted",
                     name + ": the target not yet started is reported interrupted")
        check("interrupted" in se, name + ": the summary says interrupted", se)

    # A second signal does not wait for the workers.
    p = subprocess.Popen([clitest.BRUME, "bake", sp, "-o", out, "-j", "2"], stdout=subprocess.PIPE,
                         stderr=subprocess.PIPE, text=True)
    check(wait_for_temporary(out, p), "two signals: the bake writes a temporary file")
    p.send_signal(signal.SIGINT)
    p.send_signal(signal.SIGINT)
    p.communicate(timeout=60)
    check_eq(p.returncode, 3, "two signals: exit status 3")
    check_eq(listing(out), ["east.brv", "west.brv"], "two signals: no temporary file left")
    check(all(file_bytes(os.path.join(out, n)) == b for n, b in previous.items()),
          "two signals: the previous outputs are byte-identical")


main(body)
