"""brume bake progress: on a terminal (a pseudo-terminal here), one line per target in progress
with a bar, percentage, cells per second and time left, redrawn in place a few times a second,
coloured unless NO_COLOR is set; without a terminal, or with --quiet, stderr holds only the
final summary."""
import fcntl
import os
import pty
import re
import struct
import subprocess
import termios
import time

import clitest
from clitest import check, check_eq, main, run, tiny_scene, write_scene

ESC = "\x1b["
COLOUR = re.compile(r"\x1b\[3\dm")


def run_on_pty(args, env_extra):
    """Runs brume with stderr on a pseudo-terminal; returns (exit code, stderr text, stdout, s)."""
    master, slave = pty.openpty()
    # A terminal of 100 columns (a fresh pseudo-terminal reports none).
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 30, 100, 0, 0))
    env = dict(os.environ)
    env.pop("NO_COLOR", None)
    env["TERM"] = "xterm"
    env.update(env_extra)
    t = time.monotonic()
    p = subprocess.Popen([clitest.BRUME] + args, stdout=subprocess.PIPE, stderr=slave, env=env)
    os.close(slave)
    chunks = []
    while True:
        try:
            b = os.read(master, 65536)
        except OSError:  # EIO once the child has closed the terminal
            break
        if not b:
            break
        chunks.append(b)
    out = p.stdout.read().decode()
    p.wait()
    os.close(master)
    return p.returncode, b"".join(chunks).decode(errors="replace"), out, time.monotonic() - t


def body(tmp):
    scene = tiny_scene()
    scene["sky"] = {"zenith": [100, 120, 160], "horizon": [80, 80, 80], "ground": [10, 10, 10]}
    # About a second of baking, so the line is redrawn with real figures.
    scene["targets"][0]["cells"] = [64, 32, 64]
    scene["targets"][0]["samples"] = 8
    sp = os.path.join(tmp, "yard.json")
    write_scene(sp, scene)
    out = os.path.join(tmp, "out")

    rc, err, so, secs = run_on_pty(["bake", sp, "-o", out, "--force", "-j", "2"], {})
    check_eq(rc, 0, "terminal bake exits 0", err)
    check("yard/west" in err and "[" in err and "#" in err, "a line per target with a bar", repr(err[:400]))
    check(re.search(r"\d+%", err) is not None, "a percentage")
    check(re.search(r"[\d.]+[kMG]? cells/s", err) is not None, "cells per second", repr(err[-600:]))
    check(re.search(r"(\d+ s|\d+m\d\ds|--) left", err) is not None, "time left")
    check("\r" in err and ESC + "J" in err and re.search(r"\x1b\[\d+A", err) is not None,
          "redrawn in place (carriage return, cursor up, clear)")
    check(COLOUR.search(err) is not None, "coloured on a terminal without NO_COLOR")
    draws = err.count("cells/s") + err.count("preparing")
    print("      %d progress lines drawn in %.2f s" % (draws, secs))
    check(draws >= 2, "redrawn while baking", str(draws))
    check(draws <= 2 * (secs / 0.2 + 4), "redrawn at a modest rate (about 5 a second per line)", str(draws))
    last = err.replace("\r", "\n").strip().splitlines()[-1]
    check(re.search(r"brume: 2 baked, 0 up to date, 0 failed", last) is not None, "the summary comes last", last)
    check("baked" in so and "yard/west" in so, "results still on stdout", so)

    rc, err, _, _ = run_on_pty(["bake", sp, "-o", out, "--force", "-j", "2"], {"NO_COLOR": "1"})
    check_eq(rc, 0, "NO_COLOR bake exits 0")
    check(COLOUR.search(err) is None and "cells/s" in err, "NO_COLOR: progress without colour", repr(err[:300]))

    rc, err, so, _ = run_on_pty(["bake", sp, "-o", out, "--force", "--quiet"], {})
    check_eq(rc, 0, "quiet bake exits 0")
    check_eq(err.strip().count("\n"), 0, "--quiet on a terminal: only the summary", repr(err))
    check(err.startswith("brume: 2 baked") and so == "", "--quiet: the summary and no per-target lines",
          repr(err) + repr(so))

    rc, so, err = run(["bake", sp, "-o", out, "--force"])
    check_eq(rc, 0, "piped bake exits 0")
    lines = err.strip().splitlines()
    check(len(lines) == 1 and lines[0].startswith("brume: 2 baked, 0 up to date, 0 failed"),
          "without a terminal stderr holds only the summary", repr(err))
    check("\r" not in err and ESC not in err and ESC not in so, "no control sequences without a terminal")


main(body)
