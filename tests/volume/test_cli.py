#!/usr/bin/env python3
"""Command-line tests of brume info, verify, export and diff: exit codes, output, atomic export.

usage: test_cli.py BRUME MAKE_VOLUME
"""
import json
import os
import struct
import subprocess
import sys
import tempfile

BRUME, MAKE = sys.argv[1], sys.argv[2]
failures = 0


def run(*args):
    p = subprocess.run([BRUME, *args], capture_output=True, text=True)
    return p.returncode, p.stdout, p.stderr


def check(cond, what, detail=""):
    global failures
    if cond:
        print("ok  ", what)
    else:
        failures += 1
        print("FAIL", what, detail)


def expect(args, code, what, out_has=None, err_has=None):
    rc, out, err = run(*args)
    ok = rc == code and (out_has is None or out_has in out) and (err_has is None or err_has in err)
    check(ok, what, f"\n  rc={rc} (want {code})\n  stdout={out[:400]!r}\n  stderr={err[:400]!r}")
    return out


with tempfile.TemporaryDirectory() as tmp:
    vol = {}
    for kind in ["world", "world-b", "world-wide", "frustum", "probes"]:
        vol[kind] = os.path.join(tmp, kind + ".brv")
        subprocess.run([MAKE, kind, vol[kind]], check=True)
    world = vol["world"]
    data = open(world, "rb").read()

    # --help everywhere
    for cmd in ["info", "verify", "export", "diff"]:
        expect([cmd, "--help"], 0, f"{cmd} --help", out_has="usage: brume " + cmd)
    expect(["diff", "--help"], 0, "diff --help defines the PSNR peak", out_has="range in A")

    # info, text
    out = expect(["info", world], 0, "info text", out_has="world, 20 x 10 x 12 cells")
    check("inscatter.g" in out and "rgb9e5" in out and "scene" in out and "test-yard" in out,
          "info text lists channels, encodings and metadata", out)
    check("smaller than raw float32" in out, "info text gives the compression ratio", out)
    out = expect(["info", vol["frustum"]], 0, "info text of a frustum", out_has="fov_y 60 deg")

    # info --json
    rc, out, err = run("info", world, "--json")
    j = json.loads(out)
    check(rc == 0 and j["grid"] == "world" and j["cells"] == [20, 10, 12], "info --json grid and cells", out[:300])
    check([c["name"] for c in j["channels"]] == ["extinction", "occupancy", "inscatter.r", "inscatter.g",
                                                 "inscatter.b"], "info --json channel names")
    check(j["channels"][2]["encoding"] == "rgb9e5" and j["channels"][0]["encoding"] == "f32"
          and j["channels"][1]["encoding"] == "f16", "info --json encodings")
    check(j["bounds"]["min"] == [-1, -2, -3] and j["bounds"]["max"] == [3, 4, 5], "info --json bounds")
    check(j["channels"][0]["min"] <= j["channels"][0]["max"], "info --json min <= max")
    j = json.loads(run("info", vol["frustum"], "--json")[1])
    check(j["grid"] == "frustum" and len(j["slice_depths"]) == 13 and abs(j["slice_depths"][-1] - 100) < 1e-9
          and j["camera"]["fov_y_deg"] == 60 and "bounds" not in j, "info --json frustum camera and depths")
    j = json.loads(run("info", vol["probes"], "--json")[1])
    check(j["grid"] == "probes" and j["cells"] == [5, 3, 4], "info --json probes")

    # usage and input errors
    expect(["info"], 2, "info without a file is a usage error")
    expect(["info", world, "--bogus"], 2, "info with an unknown option", err_has="--bogus")
    expect(["info", os.path.join(tmp, "missing.brv")], 3, "info on a missing file", err_has="cannot open")
    junk = os.path.join(tmp, "junk.brv")
    open(junk, "wb").write(b"this is not a volume at all\n")
    expect(["info", junk], 1, "info on a non-volume", err_has="bad magic")

    # verify
    expect(["verify", world], 0, "verify a sound file", out_has="ok")
    expect(["verify"], 2, "verify without a file")
    expect(["verify", os.path.join(tmp, "missing.brv")], 3, "verify on a missing file")
    expect(["verify", junk], 4, "verify on a non-volume", out_has="FAULT")
    cut = os.path.join(tmp, "cut.brv")
    open(cut, "wb").write(data[: len(data) - 7])
    expect(["verify", cut], 4, "verify a truncated file", out_has="truncated")
    flipped = bytearray(data)
    flipped[200] ^= 0x40  # inside the first brick's frame
    flip = os.path.join(tmp, "flip.brv")
    open(flip, "wb").write(bytes(flipped))
    expect(["verify", flip], 4, "verify a flipped byte in a brick", out_has="brick 0")
    expect(["info", cut], 1, "info on a truncated file")

    # export
    out_f32 = os.path.join(tmp, "ext.f32")
    expect(["export", world, "--channel", "extinction", "-o", out_f32], 0, "export a channel")
    raw = open(out_f32, "rb").read()
    check(len(raw) == 4 * 20 * 10 * 12, "export writes cells x 4 bytes", str(len(raw)))
    vals = struct.unpack("<%df" % (len(raw) // 4), raw)
    # fixture_smooth(0, x, y, z) at x=3, y=2, z=1, index x + 20 (y + 10 z)
    import math
    want = math.exp(-2 * 0.07 * 0.8) * (1 + 0.5 * math.sin(3 * 0.05) * math.cos(1 * 0.04 * 1.3))
    check(abs(vals[3 + 20 * (2 + 10 * 1)] - want) < 1e-6, "export order is x fastest, then y, then z",
          f"{vals[3 + 20 * (2 + 10 * 1)]} vs {want}")
    expect(["export", world, "--channel", "nope", "-o", out_f32], 2, "export an unknown channel lists them",
           err_has="extinction, occupancy, inscatter.r")
    expect(["export", world, "-o", out_f32], 2, "export without --channel")
    before = open(out_f32, "rb").read()
    expect(["export", cut, "--channel", "extinction", "-o", out_f32], 1, "export from a truncated file")
    expect(["export", flip, "--channel", "extinction", "-o", out_f32], 1, "export from a flipped file")
    check(open(out_f32, "rb").read() == before, "a failed export leaves the previous output intact")
    check(not [f for f in os.listdir(tmp) if ".tmp." in f], "no temporary files are left behind")
    expect(["export", world, "--channel", "extinction", "-o", os.path.join(tmp, "no", "such", "dir.f32")], 3,
           "export into a missing folder is an I/O failure")

    # diff
    out = expect(["diff", world, world], 0, "diff a file against itself", out_has="inf")
    out = expect(["diff", world, vol["world-b"]], 0, "diff two bakes")
    row = [l for l in out.splitlines() if l.startswith("extinction")][0].split()
    check(abs(float(row[1]) - 0.01) < 1e-6 and abs(float(row[2]) - 0.01) < 1e-6,
          "diff max abs and RMSE of a constant 0.01 offset", row)
    ja = json.loads(run("info", world, "--json")[1])
    peak = ja["channels"][0]["max"] - ja["channels"][0]["min"]
    # PSNR = 20 log10(peak / RMSE), peak the channel's range in A (f32 channel: exact min/max)
    check(abs(float(row[3]) - 20 * math.log10(peak / 0.01)) < 0.01, "diff PSNR with A's range as the peak",
          f"{row[3]} vs {20 * math.log10(peak / 0.01):.2f}")
    occ = [l for l in out.splitlines() if l.startswith("occupancy")][0].split()
    check(float(occ[1]) == 0 and occ[3] == "inf", "diff of equal channels is 0 and inf dB", occ)
    expect(["diff", world, vol["world-b"], "--max-error", "0.02"], 0, "diff within --max-error")
    expect(["diff", world, vol["world-b"], "--max-error", "0.005"], 4, "diff over --max-error",
           out_has="over --max-error")
    expect(["diff", world, vol["world-wide"]], 4, "diff of different shapes is not comparable",
           out_has="cells differ")
    expect(["diff", world, vol["frustum"]], 4, "diff of different kinds is not comparable", out_has="kinds differ")
    expect(["diff", world], 2, "diff needs two files")
    expect(["diff", world, world, "--max-error", "x"], 2, "diff with a bad --max-error")
    expect(["diff", world, junk], 1, "diff against a non-volume")

print(f"{failures} failed")
sys.exit(1 if failures else 0)
