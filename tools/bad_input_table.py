#!/usr/bin/env python3
"""bad_input_table.py - print the rows of docs/bad-input.md from the
`expect` cases of tests/cli/bad_input_*.sh (name, exit code, the words the
error must contain, what is checked about files), so the table and the tests
cannot drift apart. Usage: tools/bad_input_table.py [SOURCE_DIR] > rows.md"""
import glob
import os
import re
import shlex
import sys

src = sys.argv[1] if len(sys.argv) > 1 else os.path.join(os.path.dirname(__file__), "..")
rows = []
for path in sorted(glob.glob(os.path.join(src, "tests/cli/bad_input_*.sh"))):
    script = os.path.basename(path)
    text = open(path).read().replace("\\\n", " ")
    for line in text.splitlines():
        line = line.strip()
        if not line.startswith("expect "):
            continue
        try:
            words = shlex.split(line, posix=True)
        except ValueError:
            continue
        name, args = words[1], words[2:]
        code, errs, files = "", [], []
        i = 0
        while i < len(args):
            a = args[i]
            if a == "--":
                break
            if a in ("--code", "--err", "--gone", "--keep", "--clean", "--out", "--not", "--bug") and i + 1 < len(args):
                v = args[i + 1]
                if a == "--code":
                    code = v
                elif a == "--err":
                    errs.append(v)
                elif a == "--gone":
                    files.append("no %s, no temporary" % os.path.basename(v.replace("$", "")))
                elif a == "--keep":
                    files.append("%s byte-identical" % os.path.basename(v.replace("$", "")))
                elif a == "--clean":
                    files.append("no temporary left")
                i += 2
                continue
            i += 1
        if "$" in name:  # a helper's generic case (model_case, both): listed by hand
            continue
        if name.startswith("setup:"):
            continue
        # fault-free controls (exit 0) are not bad input; keep the ones that
        # document an accepted oddity
        if code == "0" and not re.search(r"ignored|renormalize|drift|free again", name):
            continue
        see = ", ".join("`%s`" % e for e in errs if "$" not in e) or "-"
        rows.append("| %s | %s | %s | %s | %s |" % (name, see, code.replace("|", " or "),
                                                   "; ".join(files) or "-", script))
print("| What the user does | The message names | Exit | Existing files | Test (tests/cli/) |")
print("|---|---|---|---|---|")
for r in rows:
    print(r)
print()
print("%d rows" % len(rows), file=sys.stderr)
