#!/usr/bin/env python3
"""Writes the hand-made regression inputs (tests/fuzz/corpus/*/regress-*).

Each input reproduces one finding of the fuzzers in its smallest form: a model
BLOB built field by field (format version 2, core/summary.cpp) for fuzz_blob,
and the same BLOB or values passed through SQL for fuzz_sql (the encoding of
tests/fuzz/sql_input.hpp). Inputs found by the fuzzers themselves
(regress-*-found-*) are kept as they were found and are not written here.

    python3 tests/fuzz/make_regressions.py    # from anywhere
"""
import os
import struct

HERE = os.path.dirname(os.path.abspath(__file__))
CORPUS = os.path.join(HERE, "corpus")


def fnv1a(data):
    h = 1469598103934665603
    for b in data:
        h ^= b
        h = (h * 1099511628211) & 0xFFFFFFFFFFFFFFFF
    return h


def model(cells, p=0, weighted=False, dropped=(0, 0, 0, 0, 0)):
    """A version-2 model BLOB. cells: (label text, rows, log_w, origin[p+1],
    factor[(hi, lo) x stride]) with stride = k + k(k-1)/2, k = p + 2."""
    body = struct.pack("<II", p, len(cells)) + struct.pack("<5Q", *dropped)
    for label, rows, log_w, origin, factor in cells:
        key = label.encode()
        body += struct.pack("<BI", 3, len(key)) + key + struct.pack("<Qd", rows, log_w)
        body += struct.pack("<%dd" % (p + 1), *origin)
        for hi, lo in factor:
            body += struct.pack("<dd", hi, lo)
    head = b"GFm\x01" + struct.pack("<HH", 2, 1 if weighted else 0)
    total = len(head) + 8 + len(body) + 8
    blob = head + struct.pack("<Q", total) + body
    return blob + struct.pack("<Q", fnv1a(blob))


def cell(label, rows, weight=2.0, rss=1.0, mean=0.5):
    """One cell of a model without covariates: d = (weight sum, RSS), rbar = mean - origin."""
    return (label, rows, 0.0, [1.0], [(weight, 0.0), (rss, 0.0), (mean, 0.0)])


# ---------------------------------------------------------------- fuzz_sql encoding
def sql_blob_value(b):
    """value kind v_blob (7): u8 length, or 255 then u16 length; the bytes."""
    n = len(b)
    return bytes([7]) + (bytes([n]) if n < 255 else bytes([255]) + struct.pack("<H", n)) + b


def sql_merge_twice(b):
    """form f_merge_models (5): groupfit_merge over no row of `models` (id % 7
    IN (100, 100)) and the BLOB twice; then groupfit_summary of the result
    (form f_tvf (2), report 4, one argument, style 0, value v_register (10))."""
    none = bytes([1, 100])  # v_small_int 100
    return bytes([5, 0]) + none + none + sql_blob_value(b) + sql_blob_value(b) + bytes([2, 4, 1, 0, 10])


def sql_report(b, report=4):
    """form f_tvf (2): report(BLOB), style 0."""
    return bytes([2, report, 1, 0]) + sql_blob_value(b)


def write(harness, name, data):
    d = os.path.join(CORPUS, harness)
    os.makedirs(d, exist_ok=True)
    with open(os.path.join(d, "regress-" + name), "wb") as f:
        f.write(data)


def main():
    two62 = 1 << 62
    # 1. Row counts of two cells of the same level add up past INT64_MAX in
    #    merge (summary::merge_factor: n_[into] += rows): signed overflow.
    rows_overflow = model([cell("a", two62)])
    write("fuzz_blob", "merge-rows-overflow", rows_overflow)
    write("fuzz_sql", "merge-rows-overflow", sql_merge_twice(rows_overflow))
    # 2. Dropped-row counts add up past INT64_MAX in merge
    #    (dropped_[r] += other.dropped_[r]): signed overflow.
    dropped_overflow = model([cell("a", 1)], dropped=(two62, 0, 0, 0, 0))
    write("fuzz_blob", "merge-dropped-overflow", dropped_overflow)
    write("fuzz_sql", "merge-dropped-overflow", sql_merge_twice(dropped_overflow))
    # 3. Counts that each pass the parser's checks but whose totals overflow:
    #    summary::dropped_total() (the summary report; the "no usable rows"
    #    message of every report) and summary::rows_used() / fit's row total.
    dropped_total = model([], dropped=(two62, two62, 0, 0, 0))
    write("fuzz_blob", "dropped-total-overflow", model([cell("a", 3)], dropped=(two62, two62, 0, 0, 0)))
    write("fuzz_sql", "dropped-total-overflow", sql_report(dropped_total, report=0))
    rows_total = model([cell("a", two62), cell("b", two62), cell("c", two62)])
    write("fuzz_blob", "rows-total-overflow", rows_total)
    write("fuzz_sql", "rows-total-overflow", sql_report(rows_total, report=4))
    # 4. A merge whose row count exceeds what the parser accepts (2^62 when
    #    found; 2^53 since): the merged model was written, and then rejected
    #    by every report ("a cell has an impossible row count"). Now the
    #    parser rejects this model itself.
    rows_limit = model([cell("a", (1 << 61) + (1 << 60))])
    write("fuzz_blob", "merge-rows-over-limit", rows_limit)
    write("fuzz_sql", "merge-rows-over-limit", sql_merge_twice(rows_limit))
    # 4b. The same at the current cap of 2^53 rows (core/summary.hpp max_rows):
    #    each model passes the parser, the merged counts do not. Rows used:
    #    "the merged model would have more than 2^53 rows" from merge and
    #    merge_blob alike; rows dropped (per-reason counts were not capped at
    #    first, so a merge wrote a model that the parser then rejects): "the
    #    merged model would count more than 2^53 dropped rows".
    two53 = 1 << 53
    at_cap_rows = model([cell("a", two53 // 2 + 1)])
    write("fuzz_blob", "merge-rows-at-cap", at_cap_rows)
    write("fuzz_sql", "merge-rows-at-cap", sql_merge_twice(at_cap_rows))
    at_cap_dropped = model([cell("a", 1)], dropped=(0, two53 // 2, 0, 0, 1))
    write("fuzz_blob", "merge-dropped-at-cap", at_cap_dropped)
    write("fuzz_sql", "merge-dropped-at-cap", sql_merge_twice(at_cap_dropped))
    # 5. A merge whose weight sum overflows to infinity: the merged model is
    #    written with an infinite number, then rejected by every report ("a
    #    stored number is not finite").
    nonfinite = model([cell("a", 2, weight=1e308, rss=1.0, mean=0.5)])
    write("fuzz_blob", "merge-nonfinite", nonfinite)
    write("fuzz_sql", "merge-nonfinite", sql_merge_twice(nonfinite))
    # 6. Finite input values whose sums of squares overflow: groupfit() returns
    #    a model that its own reports reject ("a stored number is not finite").
    #    form f_agg_values (0): groupfit, 2 arguments, 2 rows; values
    #    v_real_special 1e308 / -1e308 (indices 5, 6) and v_text_special 'a'
    #    (index 14); then groupfit_summary of the result.
    write("fuzz_sql", "huge-response", bytes([0, 0, 2, 2, 0, 4, 5, 6, 14, 4, 6, 6, 14, 2, 4, 1, 0, 10]))
    #    The same through a weight: groupfit_weighted(w, y, g) with w = 1e308
    #    on two rows of one level (the weight sum overflows).
    write("fuzz_sql", "huge-weight",
          bytes([0, 1, 3, 2, 0, 4, 5, 4, 2, 6, 14, 4, 5, 4, 18, 6, 14, 2, 4, 1, 0, 10]))
    #    The same through a covariate: groupfit(y, g, x) with x = 1e200, -1e200.
    write("fuzz_sql", "huge-covariate",
          bytes([0, 0, 3, 2, 0, 4, 2, 6, 14, 3]) + struct.pack("<d", 1e200)
          + bytes([4, 18, 6, 14, 3]) + struct.pack("<d", -1e200) + bytes([2, 4, 1, 0, 10]))

    # 6b. An infinite grouping value (SQLite stores 1e999 as Inf) became a
    #    real level; the model BLOB stored it and every report rejected it
    #    ("a stored number is not finite"). form f_agg_values: groupfit(1, Inf)
    #    over one row (v_small_int 1, v_real_special index 22 = Inf); then
    #    groupfit_summary of the result. Found by fuzz_sql
    #    (regress-infinite-level-found is the input as found).
    write("fuzz_sql", "infinite-level", bytes([0, 0, 2, 1, 0, 1, 1, 4, 22, 2, 4, 1, 0, 10]))

    # 6c. Errors about groupfit_contrast's weights text that said "options:"
    #    (fuzz_weights requires "weights: " on every error): a level the model
    #    does not have (fit::find_level), an open quote and text after a
    #    closing quote (detail::split_list, shared with the options parser).
    #    regress-open-quote-found is the input fuzz_weights found.
    write("fuzz_weights", "unknown-level", b"a=1, zz=-1")
    write("fuzz_weights", "open-quote", b'"a=1, b=-1')
    write("fuzz_weights", "text-after-quote", b'"a"x=1, b=-1')

    # 7. A covariate aliased by the earlier ones and followed by a kept one
    #    (x1, x2 = x1, x3): fit::evaluate indexes alias_delta_[j] (one entry
    #    per covariate kept before j) by every kept covariate, reading past
    #    its end (core/fit.cpp, the estimability loop). form f_agg_values:
    #    groupfit(y, g, x1, x1, x3) over 8 rows, then groupfit_coef.
    rows = b""
    for i in range(8):
        x1 = (3 * i) % 7
        x3 = [0.3, -1.2, 2.5, 0.7, -0.4, 1.9, -2.2, 0.05][i]
        y = 1.0 + 0.5 * x1 - x3 + 0.1 * i + (0.0 if i < 4 else 2.0)
        rows += bytes([3]) + struct.pack("<d", y) + bytes([6, 14 if i < 4 else 15])
        rows += bytes([1, x1, 1, x1, 3]) + struct.pack("<d", x3)
    write("fuzz_sql", "aliased-middle-covariate", bytes([0, 0, 5, 8, 0]) + rows + bytes([2, 0, 1, 0, 10]))


if __name__ == "__main__":
    main()
