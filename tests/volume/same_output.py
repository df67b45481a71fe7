"""Runs two builds of one program and checks they print the same, non-empty output
(here: the SSE2 and the portable scalar build of the reader, hashing what they compute)."""
import subprocess
import sys

outs = [subprocess.run([exe], check=True, capture_output=True, text=True).stdout for exe in sys.argv[1:3]]
for exe, out in zip(sys.argv[1:3], outs):
    print(f"{exe}:\n{out}")
if not outs[0].strip() or outs[0] != outs[1]:
    sys.exit("the two builds differ")
