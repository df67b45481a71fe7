"""The bad-input corpus (tests/corpus: NAME.json and NAME.expect, the expected exit code on line
1 and a message substring on line 2) through the real executable: `brume bake` into an empty
folder gives that exit code, stderr holds the message, and the folder stays empty; `brume check`
gives the same exit code."""
import os

import clitest
from clitest import check, check_eq, listing, main, run

MIN_CASES = 30


def body(tmp):
    corpus = os.path.join(clitest.SOURCE_ROOT, "tests", "corpus")
    names = sorted(n[:-5] for n in os.listdir(corpus) if n.endswith(".json")) if os.path.isdir(corpus) else []
    check(len(names) >= MIN_CASES, "the corpus has at least %d cases" % MIN_CASES, "found %d" % len(names))
    for n in names:
        ep = os.path.join(corpus, n + ".expect")
        if not os.path.isfile(ep):
            check(False, n + ": has an .expect file")
            continue
        with open(ep, encoding="utf-8", errors="replace") as f:
            lines = f.read().split("\n")
        code, text = int(lines[0]), lines[1] if len(lines) > 1 else ""
        check(code != 0 and text != "", n + ": the .expect gives a failing code and a message")
        out = os.path.join(tmp, "out-" + n)
        os.makedirs(out)
        # Run from the corpus folder, as the expectations name files relative to it.
        rc, so, se = run(["bake", n + ".json", "-o", out, "-j", "1"], cwd=corpus, timeout=60)
        check(rc == code and text in se, n + ": bake exits %d with the expected message" % code,
              "got %d:\n%s" % (rc, se))
        check_eq(listing(out), [], n + ": bake creates no file in the output folder")
        rc2, _, se2 = run(["check", n + ".json"], cwd=corpus, timeout=60)
        check(rc2 == code and text in se2, n + ": check exits %d with the same message" % code,
              "got %d:\n%s" % (rc2, se2))


main(body)
