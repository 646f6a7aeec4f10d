#!/usr/bin/env python3
"""The README's error catalogue and the code list the same messages.

Every message template that core/ and ext/ can raise (error_templates.py) must
have a row in the README's "Error catalogue" table, and every row there must
still be raised somewhere. Exits non-zero and lists the differences otherwise.
"""
import pathlib
import re
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from error_templates import ROOT, templates  # noqa: E402


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
    sys.exit(1 if missing or stale else 0)


if __name__ == "__main__":
    main()
