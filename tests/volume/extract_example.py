#!/usr/bin/env python3
"""Extracts a documented example so the tests compile exactly what the documentation shows.

usage: extract_example.py readme README.md OUT.c   the ```c block after the readme-example marker
       extract_example.py header brv.h OUT.c       the usage block of the header, wrapped in main()
"""
import sys

mode, src, out = sys.argv[1:4]
lines = open(src, encoding="utf-8").read().splitlines()
if mode == "readme":
    at = lines.index("<!-- readme-example: built and run by tests/volume -->")
    if lines[at + 1].strip() != "```c":
        sys.exit(f"{src}:{at + 2}: expected a ```c block right after the readme-example marker")
    end = lines.index("```", at + 2)
    code = "\n".join(lines[at + 2:end]) + "\n"
else:
    start = next(i for i, l in enumerate(lines) if "---- Usage" in l)
    body = []
    for l in lines[start + 1:]:
        if l.startswith(" * Random access"):
            break
        if l.startswith(" *     "):
            body.append("    " + l[7:])
    code = ("#include <stdio.h>\n#include <stdlib.h>\n\n#include \"brume/brv.h\"\n\n"
            "int main(void)\n{\n" + "\n".join(body) + "\n    return 0;\n}\n")
open(out, "w", encoding="utf-8").write(code)
