#!/usr/bin/env python3
"""Which error-catalogue messages some test triggers and checks.

For every message template of the README's error catalogue (the same set as
the code's, see test_error_catalogue.py), looks for a test under tests/ that
pins the message: an expected string in a test source that the template
matches. Expected strings are the string literals of the test sources, with
adjacent literals joined (C++ and Python concatenation) and literals joined by
`+` across a computed part (`"custom row " + std::to_string(i) + " has"`) kept
as one string whose computed part matches any `…` of the template. A template
matches when its literal parts occur in that order in one expected string,
with something (at least one character) in place of each inner `…`; a
string that several templates match counts for the most specific one.

    /usr/bin/python3 tests/docs/catalogue_coverage.py         # one line per message
    /usr/bin/python3 tests/docs/catalogue_coverage.py --missing

Searched: tests/core, tests/sql, tests/clients (not node_modules). Not
searched: tests/fuzz (its harnesses trigger errors but pin no message),
tests/bench, tests/docs (this checker), golden files.
"""
import pathlib
import re
import sys

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from error_templates import ROOT  # noqa: E402

TEST_DIRS = ["tests/core", "tests/sql", "tests/clients"]
TEST_SUFFIXES = {".cpp", ".hpp", ".py", ".mjs", ".js", ".sh", ".sql"}
GAP = "\x00"  # a computed part between joined literals

# Tokens that matter for expected strings: string literals and comments (a
# comment between two literals still joins them; a quote inside a comment
# starts nothing). C++: "..." and raw R"(...)"; Python, JavaScript and shell:
# "..." and '...' (and # comments for Python and shell, // for JavaScript).
CPP_TOKENS = re.compile(r'(?P<cmt>//[^\n]*|/\*.*?\*/)|R"\((?P<raw>.*?)\)"|"(?P<dq>(?:[^"\\\n]|\\.)*)"'
                        r"|'(?:[^'\\\n]|\\.)*'", re.S)
SCRIPT_TOKENS = {
    ".py": re.compile(r'(?P<cmt>#[^\n]*)|"(?P<dq>(?:[^"\\\n]|\\.)*)"|\'(?P<sq>(?:[^\'\\\n]|\\.)*)\'', re.S),
    ".sh": re.compile(r'(?P<cmt>(?<![\w$])#[^\n]*)|"(?P<dq>(?:[^"\\]|\\.)*)"|\'(?P<sq>[^\']*)\'', re.S),
    ".mjs": re.compile(r'(?P<cmt>//[^\n]*|/\*.*?\*/)|"(?P<dq>(?:[^"\\\n]|\\.)*)"|\'(?P<sq>(?:[^\'\\\n]|\\.)*)\''
                       r"|`(?P<bq>(?:[^`\\]|\\.)*)`", re.S),
}
SCRIPT_TOKENS[".js"] = SCRIPT_TOKENS[".mjs"]
ESCAPES = {"n": "\n", "t": "\t", '"': '"', "'": "'", "\\": "\\", "0": "\0"}


def unescape(s):
    return re.sub(r"\\(.)", lambda m: ESCAPES.get(m.group(1), m.group(1)), s)


def test_files():
    for d in TEST_DIRS:
        for p in sorted((ROOT / d).rglob("*")):
            if p.is_file() and p.suffix in TEST_SUFFIXES and "node_modules" not in p.parts:
                yield p


def joined_by_plus(between):
    """`between` is `+ <one computed operand> +`: brackets balanced, no `;` and
    no `,` `{` `}` outside brackets (so no statement or argument boundary)."""
    b = between.strip()
    if len(b) < 3 or b[0] != "+" or b[-1] != "+":
        return False
    depth = 0
    for c in b[1:-1]:
        if c in "([":
            depth += 1
        elif c in ")]":
            depth -= 1
            if depth < 0:
                return False
        elif c == ";" or (c in ",{}" and depth == 0):
            return False
    return depth == 0


def expected_strings(text, suffix):
    """The string literals of a source, adjacent ones joined."""
    tokens = SCRIPT_TOKENS.get(suffix, CPP_TOKENS)
    comment = re.compile(r"(?<![\w$])#[^\n]*" if suffix in (".py", ".sh") else r"//[^\n]*|/\*.*?\*/", re.S)
    out, cur, last_end = [], None, 0
    for m in tokens.finditer(text):
        groups = m.groupdict()
        if groups.get("cmt") is not None:
            continue  # a comment between two literals is white space
        literal = [g for g in ("raw", "dq", "sq", "bq") if groups.get(g) is not None]
        if not literal:
            continue  # a C++ character literal
        kind = literal[0]
        value = groups[kind] if kind in ("raw",) or (suffix == ".sh" and kind == "sq") else unescape(groups[kind])
        gap = text[last_end:m.start()] if cur is not None else ""
        gap = comment.sub(" ", gap)
        if cur is not None and gap.strip() == "":
            cur += value
        elif cur is not None and joined_by_plus(gap):
            cur += GAP + value
        else:
            if cur is not None:
                out.append(cur)
            cur = value
        last_end = m.end()
    if cur is not None:
        out.append(cur)
    return out


def pattern(template):
    """The template as a regex: literal parts in order, `…` = at least one character."""
    parts = template.split("…")
    rx = ""
    for i, part in enumerate(parts):
        if i > 0:
            rx += ".+?"
        rx += re.escape(part)
    return re.compile(rx, re.S)


def all_expected():
    strings = []
    for p in test_files():
        for s in expected_strings(p.read_text(errors="replace"), p.suffix):
            strings.append((s, p.relative_to(ROOT)))
    return strings


def specificity(template):
    return len(template.replace("…", ""))


def coverage(templates):
    """template -> the test files that pin it (empty: none).

    An expected string that several templates match counts for the most
    specific of them only (the most literal characters): "weights: 'b' is not
    level=weight ..." pins that message, not the looser "weights: '…' is …".
    """
    compiled = [(t, pattern(t)) for t in templates]
    found = {t: set() for t in templates}
    for s, f in all_expected():
        matches = [t for t, rx in compiled if rx.search(s)]
        if not matches:
            continue
        best = max(specificity(t) for t in matches)
        for t in matches:
            if specificity(t) == best:
                found[t].add(str(f))
    return {t: sorted(v) for t, v in found.items()}


def main():
    from test_error_catalogue import catalogue  # noqa: E402
    cat = sorted(catalogue())
    cov = coverage(cat)
    only_missing = "--missing" in sys.argv[1:]
    for t in cat:
        if only_missing and cov[t]:
            continue
        print(f"{'tested' if cov[t] else 'NO TEST'}\t{t}\t{', '.join(cov[t])}")
    n = sum(1 for t in cat if cov[t])
    sql = sum(1 for t in cat if any(not f.startswith("tests/core/") for f in cov[t]))
    print(f"{len(cat)} catalogue messages, {n} pinned by a test ({sql} through SQL in tests/sql or "
          f"tests/clients, {n - sql} only by direct calls in tests/core), {len(cat) - n} not")


if __name__ == "__main__":
    main()
