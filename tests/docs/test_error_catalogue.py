#!/usr/bin/env python3
"""The README's error catalogue, the code and the tests list the same messages.

Every message template that core/ and ext/ can raise (error_templates.py) must
have a row in the README's "Error catalogue" table, and every row there must
still be raised somewhere. Every catalogue message must also be pinned by a
test: an expected string in tests/core, tests/sql or tests/clients that the
template matches (catalogue_coverage.py, which lists them). Exits non-zero and
lists the differences otherwise.

A message that no input can reach, and that no test can therefore pin, may be
exempted only through UNREACHABLE below, with the reason it cannot be reached.
"""
import pathlib
import re
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from catalogue_coverage import coverage  # noqa: E402
from error_templates import ROOT, templates  # noqa: E402

# Catalogue messages exempt from "a test pins it", each with the reason that no
# input reaches it. Empty: every message is met by a test, through SQL where an
# input reaches it, otherwise by calling the C++ core (or, for the aggregates'
# argument-count guard, the module's own xStep) with arguments that break the
# check. An entry that is not in the catalogue, or that a test pins after all,
# is an error: the list only shrinks.
UNREACHABLE = {}


def catalogue():
    text = (ROOT / "README.md").read_text()
    m = re.search(r"^## Error catalogue\n(.*?)(?=^## )", text, re.S | re.M)
    if not m:
        sys.exit("README.md has no '## Error catalogue' section")
    rows = set()
    for line in m.group(1).splitlines():
        cell = re.match(r"^\| `(.*?)` \|", line)
        if cell:
            rows.add(cell.group(1).replace("\\|", "|"))
    return rows


def main():
    code = templates()
    docs = catalogue()
    missing = sorted(set(code) - docs)
    stale = sorted(docs - set(code))
    for t in missing:
        print(f"not in the catalogue: {t}   ({code[t]})")
    for t in stale:
        print(f"in the catalogue but raised nowhere: {t}")
    print(f"{len(code)} messages in the code, {len(docs)} in the catalogue")
    if len(code) < 50:
        sys.exit("the extractor found suspiciously few messages")

    pinned = coverage(sorted(docs))
    untested = sorted(t for t in docs if not pinned[t] and t not in UNREACHABLE)
    bad_exemptions = sorted(t for t in UNREACHABLE if t not in docs or pinned.get(t))
    for t in untested:
        print(f"no test pins this catalogue message: {t}   ({code.get(t, 'not raised')})")
    for t in bad_exemptions:
        print(f"UNREACHABLE lists a message that is {'pinned by a test' if pinned.get(t) else 'not in the catalogue'}: {t}")
    n = sum(1 for t in docs if pinned[t])
    print(f"{n} of {len(docs)} catalogue messages pinned by a test, {len(UNREACHABLE)} exempt as unreachable")
    sys.exit(1 if missing or stale or untested or bad_exemptions else 0)


if __name__ == "__main__":
    main()
