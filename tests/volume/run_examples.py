#!/usr/bin/env python3
"""Runs the header's usage block and the README example on a small volume the test writes.

usage: run_examples.py MAKE_VOLUME USAGE_EXE README_EXE
"""
import os
import subprocess
import sys
import tempfile

make, usage, readme = (os.path.abspath(p) for p in sys.argv[1:4])
with tempfile.TemporaryDirectory() as tmp:
    subprocess.run([make, "world", os.path.join(tmp, "fog.brv")], check=True)
    u = subprocess.run([usage], cwd=tmp, capture_output=True, text=True)
    print(u.stdout, u.stderr)
    # fixture_smooth(0, 0, 0, 0) = 1 (extinction channel, f32)
    ok_u = u.returncode == 0 and "first cell 1 1/m of 20 x 10 x 12" in u.stdout
    r = subprocess.run([readme, "fog.brv"], cwd=tmp, capture_output=True, text=True)
    print(r.stdout, r.stderr)
    vals = dict(l.split(" = ") for l in r.stdout.splitlines())
    ok_r = (r.returncode == 0 and list(vals) == ["extinction", "occupancy", "inscatter.r", "inscatter.g",
                                                 "inscatter.b"] and 0.6 < float(vals["extinction"].split()[0]) < 1.41)
    bad = subprocess.run([readme, "missing.brv"], cwd=tmp, capture_output=True, text=True)
    ok_bad = bad.returncode == 1 and "cannot read" in bad.stderr
print("usage block:", "ok" if ok_u else "FAIL")
print("README example:", "ok" if ok_r else "FAIL")
print("README example on a missing file:", "ok" if ok_bad else "FAIL")
sys.exit(0 if ok_u and ok_r and ok_bad else 1)
