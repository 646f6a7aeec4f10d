#!/usr/bin/env python3
"""Extracts the message templates of every error groupfit can raise.

A template is the text of a `groupfit::error(...)` / `error(...)` /
`sqlite3_result_error`-bound message with each computed part replaced by `…`
(string literals joined, everything else elided). Used by
test_error_catalogue.py to check that the README's error catalogue and the code
agree, and runnable by hand to list the templates:

    /usr/bin/python3 tests/docs/error_templates.py
"""
import pathlib
import re
import sys

ROOT = pathlib.Path(__file__).resolve().parents[2]
SOURCES = sorted(list((ROOT / "core").glob("*.cpp")) + list((ROOT / "ext").glob("*.cpp")))
CALL = re.compile(r"(?<![\w:])(?:groupfit::)?error\(|set_vtab_error\(\s*\w+\s*,")


def call_args(text, start):
    """The argument text of a call whose '(' ends at `start`."""
    depth, i, in_str = 1, start, None
    while i < len(text) and depth:
        c = text[i]
        if in_str:
            if c == "\\":
                i += 1
            elif c == in_str:
                in_str = None
        elif c in "\"'":
            in_str = c
        elif c == "(":
            depth += 1
        elif c == ")":
            depth -= 1
        i += 1
    return text[start:i - 1]


def template(args):
    """Literal parts joined, computed parts as '…'."""
    out, i, last_literal = [], 0, False
    pending_gap = False
    while i < len(args):
        c = args[i]
        if c == '"':
            j, buf = i + 1, []
            while args[j] != '"':
                if args[j] == "\\":
                    buf.append({"n": "\n", "t": "\t", '"': '"', "\\": "\\"}.get(args[j + 1], args[j + 1]))
                    j += 2
                else:
                    buf.append(args[j])
                    j += 1
            if pending_gap:
                out.append("…")
            out.append("".join(buf))
            pending_gap = False
            i = j + 1
        elif c in " \n\t+":
            i += 1
        else:
            # A computed part: skip to the next '+' at depth 0 (or the end).
            depth = 0
            while i < len(args):
                ch = args[i]
                if ch == '"' and depth >= 0:
                    # a literal inside a computed part (e.g. a ?: branch)
                    j = i + 1
                    while args[j] != '"':
                        j += 2 if args[j] == "\\" else 1
                    i = j + 1
                    continue
                if ch in "([{":
                    depth += 1
                elif ch in ")]}":
                    depth -= 1
                elif ch == "+" and depth == 0:
                    break
                i += 1
            pending_gap = True
    if pending_gap:
        out.append("…")
    return re.sub(r"(…)+", "…", "".join(out))


def templates():
    found = {}
    for path in SOURCES:
        text = path.read_text()
        for m in CALL.finditer(text):
            args = call_args(text, m.end())
            # std::string("...") is a literal for our purpose.
            args = re.sub(r'std::string\(("(?:[^"\\]|\\.)*")\)', r"\1", args)
            if '"' not in args:
                continue  # rethrow of a computed message (e.g. e.what())
            t = template(args)
            if t.strip("… ") == "":
                continue
            found.setdefault(t, f"{path.relative_to(ROOT)}:{text.count(chr(10), 0, m.start()) + 1}")
    return found


if __name__ == "__main__":
    for t, where in sorted(templates().items()):
        print(f"{where}\t{t}")
    sys.exit(0)
