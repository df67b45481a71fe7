"""Helpers for the command-line tests: run the real brume executable on small scenes.

Every test script takes the brume executable as its first argument and the project's source
root as its second, creates its own temporary folder and removes it when it passes.
"""
import json
import os
import shutil
import subprocess
import sys
import tempfile
import traceback

BRUME = None
SOURCE_ROOT = None
_failures = []
_checks = 0


def setup():
    global BRUME, SOURCE_ROOT
    if len(sys.argv) < 3:
        sys.exit("usage: %s BRUME_EXE SOURCE_ROOT" % sys.argv[0])
    BRUME = os.path.abspath(sys.argv[1])
    SOURCE_ROOT = os.path.abspath(sys.argv[2])
    tmp = tempfile.mkdtemp(prefix="brume-cli-")
    return tmp


def run(args, cwd=None, env=None, timeout=120):
    """Runs brume with args; returns (exit code, stdout, stderr)."""
    e = dict(os.environ)
    e.pop("NO_COLOR", None)
    if env:
        e.update(env)
    p = subprocess.run([BRUME] + list(args), cwd=cwd, env=e, capture_output=True, text=True,
                       timeout=timeout)
    return p.returncode, p.stdout, p.stderr


def check(cond, what, detail=""):
    """Records one assertion; a failure is reported at the end and fails the script."""
    global _checks
    _checks += 1
    if not cond:
        _failures.append(what + ((": " + detail) if detail else ""))
        print("FAIL  " + what + ((": " + detail) if detail else ""))
    else:
        print("ok    " + what)


def check_eq(a, b, what, context=""):
    check(a == b, what, "got %r, expected %r%s" % (a, b, ("\n" + context) if context else ""))


def write_scene(path, scene):
    with open(path, "w") as f:
        json.dump(scene, f, indent=2)


def read_report(path):
    with open(path) as f:
        rep = json.load(f)
    return {(t["scene"], t["name"]): t for t in rep["targets"]}, rep


def statuses(report_path):
    by, _ = read_report(report_path)
    return {k[1]: v["status"] for k, v in by.items()}


def file_bytes(path):
    with open(path, "rb") as f:
        return f.read()


def listing(folder):
    """Every file below folder, relative, sorted."""
    out = []
    for root, _, files in os.walk(folder):
        for n in files:
            out.append(os.path.relpath(os.path.join(root, n), folder))
    return sorted(out)


def finish(tmp):
    if _failures:
        print("\n%d of %d checks failed (temporary folder kept: %s)" % (len(_failures), _checks, tmp))
        for f in _failures:
            print("  " + f)
        sys.exit(1)
    if _checks == 0:
        print("no checks ran")
        sys.exit(1)
    shutil.rmtree(tmp, ignore_errors=True)
    print("\n%d checks passed" % _checks)
    sys.exit(0)


def main(body):
    tmp = setup()
    try:
        body(tmp)
    except Exception:
        traceback.print_exc()
        _failures.append("exception")
    finish(tmp)


def tiny_scene(name="yard", cells=16, extra_targets=(), lights=None, geometry=None, media=None):
    """A small scene of our own: two world targets 16 m apart, a directional light that reaches
    both and a short-range point light near each one, a box, uniform fog."""
    if lights is None:
        lights = [
            {"type": "directional", "direction": [0.3, -1, 0.2], "illuminance_lux": 1000},
            {"type": "point", "position": [3, 3, 3], "intensity_cd": 100, "range_m": 4},
            {"type": "point", "position": [25, 3, 3], "intensity_cd": 100, "range_m": 4},
        ]
    return {
        "brume": 1,
        "name": name,
        "fog_bounds": {"min": [0, 0, 0], "max": [30, 6, 6]},
        "geometry": geometry if geometry is not None else [
            {"shape": "box", "min": [2, 0, 2], "max": [3, 2, 3]}],
        "lights": lights,
        "media": media if media is not None else [{"type": "uniform", "visibility_m": 100}],
        "targets": [
            {"name": "west", "grid": "world", "min": [0, 0, 0], "max": [6, 6, 6],
             "cells": [cells, cells, cells]},
            {"name": "east", "grid": "world", "min": [22, 0, 0], "max": [28, 6, 6],
             "cells": [cells, cells, cells]},
        ] + list(extra_targets),
    }
