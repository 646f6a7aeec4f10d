#!/usr/bin/python3
"""groupfit from Python's standard sqlite3 module, on the demo data.

    /usr/bin/python3 tests/clients/test_python.py <path of groupfit.so> <source dir>

Loads datasets/deliveries.csv and datasets/depots.csv into an in-memory
database (empty field -> None), runs groupfit and every report, and checks the
results against direct computations in Python (counts, level means and SDs,
the one-way F test, the ANCOVA slopes and adjusted means) and against the same
analysis run by the sqlite3 command-line shell on the database built by
datasets/build_demo.sql. Prints every failed check and exits 1 if any failed.
"""

import csv
import math
import os
import shutil
import sqlite3
import subprocess
import sys
import tempfile

failures = []
checks = 0


def check(ok, what):
    global checks
    checks += 1
    if not ok:
        failures.append(what)
        print("FAIL:", what)


def close(a, b, rel):
    if a == b:
        return True
    if a is None or b is None:
        return False
    if abs(a) < 1e-250 and abs(b) < 1e-250:  # p-values at the edge of underflow
        return True
    return abs(a - b) <= rel * max(abs(a), abs(b))


def check_close(a, b, rel, what):
    check(close(a, b, rel), "%s: %r vs %r (rel %g)" % (what, a, b, rel))


def check_error(conn, sql, params, expected, what):
    try:
        conn.execute(sql, params).fetchall()
    except sqlite3.Error as e:  # OperationalError for both prepare and step errors
        check(str(e) == expected, "%s: error %r, expected %r" % (what, str(e), expected))
        return
    check(False, "%s: no error, expected %r" % (what, expected))


def rows_as_dicts(cur):
    names = [d[0] for d in cur.description]
    return [dict(zip(names, r)) for r in cur.fetchall()]


def opt_float(s):
    return None if s == "" else float(s)


def main():
    if len(sys.argv) != 3:
        print("usage: test_python.py <groupfit module> <source dir>")
        return 2
    module, source = sys.argv[1], sys.argv[2]
    deliveries_csv = os.path.join(source, "datasets", "deliveries.csv")
    depots_csv = os.path.join(source, "datasets", "depots.csv")

    # ------------------------------------------------------------ the data
    with open(deliveries_csv, newline="") as f:
        records = [
            (int(r["delivery_id"]), int(r["depot_id"]), r["carrier"] or None, r["shift"] or None,
             opt_float(r["distance_km"]), opt_float(r["weight_kg"]), opt_float(r["minutes"]))
            for r in csv.DictReader(f)
        ]
    with open(depots_csv, newline="") as f:
        depots = [(int(r["depot_id"]), r["depot_name"], r["region"]) for r in csv.DictReader(f)]
    check(len(records) == 2400, "deliveries.csv has 2400 rows (%d)" % len(records))

    conn = sqlite3.connect(":memory:")
    conn.enable_load_extension(True)
    conn.load_extension(module)
    conn.enable_load_extension(False)
    conn.execute("CREATE TABLE deliveries (delivery_id INTEGER PRIMARY KEY, depot_id INTEGER, "
                 "carrier TEXT, shift TEXT, distance_km REAL, weight_kg REAL, minutes REAL)")
    conn.execute("CREATE TABLE depots (depot_id INTEGER PRIMARY KEY, depot_name TEXT, region TEXT)")
    conn.executemany("INSERT INTO deliveries VALUES (?, ?, ?, ?, ?, ?, ?)", records)
    conn.executemany("INSERT INTO depots VALUES (?, ?, ?)", depots)

    # --------------------------------------------------- direct computation
    # Row accounting in the order groupfit applies it: response, grouping, covariates.
    null_y = sum(1 for r in records if r[6] is None)
    null_g = sum(1 for r in records if r[6] is not None and r[2] is None)
    null_x = sum(1 for r in records
                 if r[6] is not None and r[2] is not None and (r[4] is None or r[5] is None))
    complete = [r for r in records if None not in (r[2], r[4], r[5], r[6])]
    oneway = [r for r in records if r[2] is not None and r[6] is not None]
    check((null_y, null_g, null_x, len(complete)) == (12, 7, 24, 2357),
          "README counts of blanks: %r" % ((null_y, null_g, null_x, len(complete)),))

    carriers = sorted({r[2] for r in oneway})
    by = {c: [r for r in oneway if r[2] == c] for c in carriers}
    mean = {c: math.fsum(r[6] for r in by[c]) / len(by[c]) for c in carriers}
    sd = {c: math.sqrt(math.fsum((r[6] - mean[c]) ** 2 for r in by[c]) / (len(by[c]) - 1))
          for c in carriers}
    grand = math.fsum(r[6] for r in oneway) / len(oneway)
    ss_between = math.fsum(len(by[c]) * (mean[c] - grand) ** 2 for c in carriers)
    ss_within = math.fsum((r[6] - mean[r[2]]) ** 2 for r in oneway)
    k, n = len(carriers), len(oneway)
    f_oneway = (ss_between / (k - 1)) / (ss_within / (n - k))

    # ANCOVA with common slopes: pooled within-carrier regression on distance, weight.
    cby = {c: [r for r in complete if r[2] == c] for c in carriers}
    cm = {c: [math.fsum(r[j] for r in cby[c]) / len(cby[c]) for j in (4, 5, 6)] for c in carriers}
    sxx = [[0.0, 0.0], [0.0, 0.0]]
    sxy = [0.0, 0.0]
    for r in complete:
        m = cm[r[2]]
        d = (r[4] - m[0], r[5] - m[1], r[6] - m[2])
        for a in range(2):
            sxy[a] += d[a] * d[2]
            for b in range(2):
                sxx[a][b] += d[a] * d[b]
    det = sxx[0][0] * sxx[1][1] - sxx[0][1] * sxx[1][0]
    beta = [(sxx[1][1] * sxy[0] - sxx[0][1] * sxy[1]) / det,
            (sxx[0][0] * sxy[1] - sxx[1][0] * sxy[0]) / det]
    xbar = [math.fsum(r[j] for r in complete) / len(complete) for j in (4, 5)]
    adjusted = {c: cm[c][2] - beta[0] * (cm[c][0] - xbar[0]) - beta[1] * (cm[c][1] - xbar[1])
                for c in carriers}

    # ----------------------------------------------------------- the models
    m1 = conn.execute("SELECT groupfit(minutes, carrier) FROM deliveries").fetchone()[0]
    m3 = conn.execute("SELECT groupfit(minutes, carrier, distance_km, weight_kg) "
                      "FROM deliveries").fetchone()[0]
    check(isinstance(m1, bytes) and isinstance(m3, bytes), "models are bytes")
    check(m1[:4] == b"GFm\x01", "model header")
    names = "names=carrier, distance_km, weight_kg"

    # groupfit_summary: row accounting.
    s = rows_as_dicts(conn.execute("SELECT * FROM groupfit_summary(?, ?)", (m3, names)))
    check(len(s) == 1, "summary has one row")
    s = s[0]
    check(s["rows_used"] == 2357, "rows_used %r" % s["rows_used"])
    check(s["rows_dropped"] == 43, "rows_dropped %r" % s["rows_dropped"])
    check((s["dropped_null_response"], s["dropped_null_group"], s["dropped_null_covariate"],
           s["dropped_null_weight"], s["dropped_zero_weight"]) == (null_y, null_g, null_x, 0, 0),
          "dropped counts %r" % ((s["dropped_null_response"], s["dropped_null_group"],
                                  s["dropped_null_covariate"]),))
    check((s["levels"], s["covariates"], s["parameters"], s["rank"]) == (5, 2, 7, 7),
          "levels/covariates/parameters/rank")
    check(s["aliased"] is None, "nothing aliased")
    check(s["df_resid"] == 2357 - 7, "df_resid %r" % s["df_resid"])
    s1 = rows_as_dicts(conn.execute("SELECT * FROM groupfit_summary(?)", (m1,)))[0]
    check(s1["rows_used"] == n and s1["rows_dropped"] == null_y + null_g,
          "one-way accounting %r %r" % (s1["rows_used"], s1["rows_dropped"]))
    check_close(s1["r_squared"], ss_between / (ss_between + ss_within), 1e-11, "one-way r_squared")

    # groupfit_levels: observed n, mean, SD (one-way) and adjusted means (ANCOVA).
    lv = rows_as_dicts(conn.execute("SELECT * FROM groupfit_levels(?)", (m1,)))
    check([r["level"] for r in lv] == carriers, "levels in ascending order")
    for r in lv:
        c = r["level"]
        check(r["n"] == len(by[c]), "n of %s" % c)
        check_close(r["mean"], mean[c], 1e-12, "mean of %s" % c)
        check_close(r["sd"], sd[c], 1e-10, "sd of %s" % c)
        check_close(r["adjusted_mean"], mean[c], 1e-12, "one-way adjusted mean of %s" % c)
    lv3 = rows_as_dicts(conn.execute("SELECT * FROM groupfit_levels(?, ?)", (m3, names)))
    for r in lv3:
        c = r["level"]
        check(r["n"] == len(cby[c]), "ANCOVA n of %s" % c)
        check_close(r["adjusted_mean"], adjusted[c], 1e-9, "adjusted mean of %s" % c)
        check(r["covariates_at"].startswith("distance_km="), "covariates_at %r" % r["covariates_at"])

    # groupfit_coef: dummy identities (one-way) and slopes (ANCOVA).
    co = rows_as_dicts(conn.execute("SELECT * FROM groupfit_coef(?)", (m1,)))
    check(len(co) == 5, "five coefficients")
    check(co[0]["term"] == "intercept" and co[0]["compares"] == "mean of amberpost",
          "intercept row %r" % co[0]["compares"])
    check_close(co[0]["estimate"], mean["amberpost"], 1e-12, "intercept = base mean")
    for r in co[1:]:
        check_close(r["estimate"], mean[r["label"]] - mean["amberpost"], 1e-11,
                    "coefficient %s" % r["label"])
        check(r["compares"] == r["label"] + " vs amberpost", "compares %r" % r["compares"])
    co3 = rows_as_dicts(conn.execute("SELECT * FROM groupfit_coef(?, ?)", (m3, names)))
    slopes = {r["term"]: r for r in co3 if r["label"] == "slope"}
    check(sorted(slopes) == ["distance_km", "weight_kg"], "slope rows %r" % sorted(slopes))
    check_close(slopes["distance_km"]["estimate"], beta[0], 1e-10, "distance slope")
    check_close(slopes["weight_kg"]["estimate"], beta[1], 1e-10, "weight slope")
    # The invented data were made with slopes 1.6 and 0.9 (datasets/README.md).
    check(abs(beta[0] - 1.6) < 0.1 and abs(beta[1] - 0.9) < 0.2, "slopes near 1.6, 0.9: %r" % beta)

    # groupfit_tests: the one-way F test.
    te = rows_as_dicts(conn.execute("SELECT * FROM groupfit_tests(?, 'names=carrier')", (m1,)))
    f_rows = [r for r in te if r["term"] == "carrier" and r["method"] == "f_test"]
    check(len(f_rows) == 1, "one F test row for carrier")
    check_close(f_rows[0]["sum_sq"], ss_between, 1e-11, "SS between")
    check_close(f_rows[0]["f_stat"], f_oneway, 1e-11, "F statistic")
    check(f_rows[0]["df"] == k - 1 and f_rows[0]["df_denom"] == n - k, "F degrees of freedom")
    resid = [r for r in te if r["term"] == "residual"]
    check(len(resid) == 1, "one residual row")
    check_close(resid[0]["sum_sq"], ss_within, 1e-11, "SS within")
    check(any(r["method"] == "welch_f_test" for r in te), "Welch row present")
    te3 = rows_as_dicts(conn.execute("SELECT * FROM groupfit_tests(?, ?)", (m3, names)))
    check([r["term"] for r in te3] == ["carrier", "distance_km", "weight_kg",
                                       "carrier \u00d7 covariates", "model", "residual", "total"],
          "ANCOVA test rows %r" % [r["term"] for r in te3])
    check(te3[3]["method"] == "homogeneity_of_slopes" and te3[3]["df"] == 8,
          "homogeneity of slopes row (4 extra slopes for each of 2 covariates)")

    # groupfit_deviations: two rows per level; vs the unweighted mean of level means.
    dv = rows_as_dicts(conn.execute("SELECT * FROM groupfit_deviations(?)", (m1,)))
    check(len(dv) == 2 * k, "deviation rows")
    unweighted = math.fsum(mean.values()) / k
    weighted = math.fsum(len(by[c]) * mean[c] for c in carriers) / n
    for r in dv:
        ref = unweighted if r["reference"] == "unweighted mean of level means" else weighted
        check_close(r["estimate"], mean[r["level"]] - ref, 1e-10,
                    "deviation of %s vs %s" % (r["level"], r["reference"]))

    # Weighted fit through Python: weights = weight_kg give weighted level means.
    mw = conn.execute("SELECT groupfit_weighted(weight_kg, minutes, carrier) FROM deliveries"
                      ).fetchone()[0]
    lw = rows_as_dicts(conn.execute("SELECT level, weight_sum, mean FROM groupfit_levels(?)", (mw,)))
    for r in lw:
        rs = [x for x in oneway if x[2] == r["level"] and x[5] is not None]
        wsum = math.fsum(x[5] for x in rs)
        check_close(r["weight_sum"], wsum, 1e-12, "weight sum of %s" % r["level"])
        check_close(r["mean"], math.fsum(x[5] * x[6] for x in rs) / wsum, 1e-12,
                    "weighted mean of %s" % r["level"])

    # GROUP BY depot joined with depots, and merging the per-depot models.
    seg = conn.execute(
        "SELECT d.region, d.depot_id, s.model FROM (SELECT depot_id, groupfit(minutes, carrier, "
        "distance_km, weight_kg) AS model FROM deliveries GROUP BY depot_id) AS s "
        "JOIN depots AS d USING (depot_id) ORDER BY depot_id").fetchall()
    check(len(seg) == 8, "eight depots")
    used = 0
    for region, depot, model in seg:
        used += conn.execute("SELECT rows_used FROM groupfit_summary(?)", (model,)).fetchone()[0]
        alone = conn.execute("SELECT count(*) FROM deliveries WHERE depot_id = ? AND minutes IS NOT "
                             "NULL AND carrier IS NOT NULL AND weight_kg IS NOT NULL",
                             (depot,)).fetchone()[0]
        got = conn.execute("SELECT rows_used FROM groupfit_summary(?)", (model,)).fetchone()[0]
        check(got == alone, "depot %d rows_used %d vs %d" % (depot, got, alone))
    check(used == 2357, "depot models use every complete row once (%d)" % used)
    for order in ("ASC", "DESC"):
        merged = conn.execute(
            "SELECT groupfit_merge(model) FROM (SELECT groupfit(minutes, carrier, distance_km, "
            "weight_kg) AS model, depot_id FROM deliveries GROUP BY depot_id ORDER BY depot_id %s)"
            % order).fetchone()[0]
        for fn in ("groupfit_coef", "groupfit_levels", "groupfit_tests", "groupfit_summary",
                   "groupfit_deviations"):
            a = conn.execute("SELECT * FROM %s(?)" % fn, (m3,)).fetchall()
            b = conn.execute("SELECT * FROM %s(?)" % fn, (merged,)).fetchall()
            check(len(a) == len(b) and len(a) > 0, "%s merged row count" % fn)
            for ra, rb in zip(a, b):
                for va, vb in zip(ra, rb):
                    if isinstance(va, float) and isinstance(vb, float):
                        check_close(va, vb, 1e-9 if fn == "groupfit_summary" else 1e-12,
                                    "%s merged (%s) value" % (fn, order))
                    elif isinstance(va, str) and "=" in va:
                        pass  # covariates_at: the covariate means as text, compared above
                    else:
                        check(va == vb, "%s merged (%s): %r vs %r" % (fn, order, va, vb))

    # Errors reach Python as sqlite3.OperationalError with the exact text.
    check_error(conn, "SELECT * FROM groupfit_coef(?, 'coding=foo')", (m1,),
                "groupfit_coef: options: coding must be one of dummy, effect, weighted_effect, "
                "helmert, reverse_helmert, successive, polynomial, custom (not 'foo')", "bad coding")
    check_error(conn, "SELECT groupfit(minutes, carrier, shift) FROM deliveries", (),
                "groupfit: covariate 1 (argument 3) must be a number, got text 'day'",
                "text covariate")
    check_error(conn, "SELECT * FROM groupfit_coef(?)", (m1[:-1],),
                "groupfit_coef: not a groupfit model: the BLOB is %d bytes but its header says %d "
                "(truncated or padded)" % (len(m1) - 1, len(m1)), "truncated model")
    check_error(conn, "SELECT * FROM groupfit_coef", (),
                "groupfit_coef: the model argument is missing", "missing model")

    # ------------------------------------- the same analysis in the sqlite3 shell
    shell = shutil.which("sqlite3")
    check(shell is not None, "the sqlite3 shell is on PATH")
    if shell:
        with tempfile.TemporaryDirectory() as tmp:
            db = os.path.join(tmp, "demo.db")
            with open(os.path.join(source, "datasets", "build_demo.sql")) as f:
                p = subprocess.run([shell, db], stdin=f, cwd=source, capture_output=True, text=True)
            check(p.returncode == 0, "build_demo.sql: %s" % p.stderr.strip())
            # The shell stores its results in the database file, so that the
            # doubles are compared exactly (no text formatting in between).
            script = (
                ".load %s\n"
                "CREATE TABLE shell_models AS SELECT groupfit(minutes, carrier) AS m1, "
                "groupfit(minutes, carrier, distance_km, weight_kg) AS m3 FROM deliveries;\n"
                "CREATE TABLE shell_coef AS SELECT * FROM groupfit_coef("
                "(SELECT m3 FROM shell_models), '%s');\n"
                "CREATE TABLE shell_tests AS SELECT * FROM groupfit_tests("
                "(SELECT m1 FROM shell_models), 'names=carrier');\n"
                "SELECT 'rows', count(*) FROM shell_coef;\n" % (module, names))
            p = subprocess.run([shell, "-bail", db], input=script, capture_output=True, text=True)
            check(p.returncode == 0 and p.stdout.strip() == "rows|7",
                  "shell analysis: %r %r" % (p.stdout.strip(), p.stderr.strip()))
            shell_db = sqlite3.connect(db)
            sm1, sm3 = shell_db.execute("SELECT m1, m3 FROM shell_models").fetchone()
            # The same rows in the same order give byte-identical models.
            check(sm1 == m1, "one-way model equals the shell's")
            check(sm3 == m3, "ANCOVA model equals the shell's")
            for table, fn, model, opts in (("shell_coef", "groupfit_coef", m3, names),
                                           ("shell_tests", "groupfit_tests", m1, "names=carrier")):
                a = conn.execute("SELECT * FROM %s(?, ?)" % fn, (model, opts)).fetchall()
                b = shell_db.execute("SELECT * FROM %s" % table).fetchall()
                check(len(a) == len(b) and len(a) > 0, "%s rows %d vs %d" % (fn, len(a), len(b)))
                for ra, rb in zip(a, b):
                    check(ra == rb, "%s from Python %r equals the shell's %r" % (fn, ra, rb))
            shell_db.close()

    conn.close()
    if failures:
        print("%d of %d checks failed" % (len(failures), checks))
        return 1
    print("all %d checks passed" % checks)
    return 0


if __name__ == "__main__":
    sys.exit(main())
