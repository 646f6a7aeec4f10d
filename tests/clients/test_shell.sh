#!/bin/bash
# groupfit from the sqlite3 command-line shell.
#
#   bash tests/clients/test_shell.sh <path of groupfit.so> <source dir>
#
# Loads the module by its path WITHOUT the .so suffix (the shell's name lookup
# must add it and derive the entry point sqlite3_groupfit_init), runs a small
# analysis whose results are known exactly, the demo database's row
# accounting, and an error, and compares the output with the expected text.
# Exits 1 on any mismatch, printing a diff.
set -u

module=${1:?usage: test_shell.sh <groupfit module> <source dir>}
source_dir=${2:?usage: test_shell.sh <groupfit module> <source dir>}
shell=$(command -v sqlite3) || { echo "FAIL: the sqlite3 shell is not on PATH"; exit 1; }

failed=0
fail() { echo "FAIL: $*"; failed=1; }

tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

# The path without its suffix must not name a file itself, or the test would
# not show that the shell adds the suffix.
stem=${module%.so}
[ "$stem" != "$module" ] || fail "module path $module does not end in .so"
[ ! -e "$stem" ] || fail "$stem exists, so the suffix lookup is not exercised"
[ -f "$module" ] || fail "$module does not exist"

# ---------------------------------------------------------- a small analysis
# Levels a, b, c with means 2, 7, 3: dummy coding gives 2, 5, 1; effect
# coding gives the mean of means 4 and deviations -2, 3. Residual SS = 2 + 8 + 2
# = 12 on 3 df, so sigma^2 = 4, the SE of the intercept is sqrt(4/2) and that of
# a difference sqrt(4 (1/2 + 1/2)) = 2; between SS = 2 (2^2 + 3^2 + 1^2) = 28,
# so F = (28/2) / 4 = 3.5. Rows with a NULL are dropped, one per reason.
cat > "$tmp/small.sql" <<EOF
.bail on
.load $stem
.mode list
.separator |
.nullvalue NULL
CREATE TABLE t(g TEXT, y REAL, x REAL);
INSERT INTO t VALUES ('a', 1, 1), ('a', 3, 2), ('b', 5, 1), ('b', 9, 4), ('c', 2, 0), ('c', 4, 1),
                     (NULL, 8, 1), ('a', NULL, 3), ('b', 6, NULL);
CREATE TABLE m AS SELECT groupfit(y, g) FILTER (WHERE x IS NOT NULL) AS one,
                          groupfit(y, g, x) AS cov FROM t;
SELECT term, label, compares, estimate, printf('%.12g', std_error), df FROM groupfit_coef((SELECT one FROM m));
SELECT label, estimate FROM groupfit_coef((SELECT one FROM m), 'coding=effect; names=grp');
SELECT level, position, n, mean, printf('%.12g', sd) FROM groupfit_levels((SELECT one FROM m), 'order=c');
SELECT term, method, df, df_denom, sum_sq, mean_sq, f_stat FROM groupfit_tests((SELECT one FROM m))
  WHERE method = 'f_test';
SELECT rows_used, rows_dropped, dropped_null_response, dropped_null_group, dropped_null_covariate,
       levels, covariates, rank, df_resid
  FROM groupfit_summary((SELECT cov FROM m));
SELECT term, label FROM groupfit_coef((SELECT cov FROM m), 'names=grp,x');
SELECT typeof(groupfit(y, g)) FROM t WHERE 0;
SELECT count(*) FROM groupfit_coef(NULL);
SELECT groupfit_limit('levels'), groupfit_limit('covariates');
EOF

cat > "$tmp/small.expected" <<'EOF'
intercept|intercept|mean of a|2.0|1.41421356237|3.0
group|b|b vs a|5.0|2|3.0
group|c|c vs a|1.0|2|3.0
intercept|4.0
a|-2.0
b|3.0
c|1|2|3.0|1.41421356237
a|2|2|2.0|1.41421356237
b|3|2|7.0|2.82842712475
group|f_test|2.0|3.0|28.0|14.0|3.5
model|f_test|2.0|3.0|28.0|14.0|3.5
6|3|1|1|1|3|1|4|2.0
intercept|intercept
grp|b
grp|c
x|slope
null
0
50000|32
EOF

if ! "$shell" :memory: < "$tmp/small.sql" > "$tmp/small.out" 2> "$tmp/small.err"; then
    fail "the small analysis failed: $(cat "$tmp/small.err")"
fi
if ! diff -u "$tmp/small.expected" "$tmp/small.out"; then
    fail "small analysis output differs (diff above)"
fi

# Errors: reported with the exact message, and the shell exits non-zero.
cat > "$tmp/error.sql" <<EOF
.bail on
.load $stem
SELECT * FROM groupfit_coef((SELECT groupfit(y, g) FROM (SELECT 1 y, 'a' g)), 'coding=foo');
EOF
if "$shell" :memory: < "$tmp/error.sql" > "$tmp/error.out" 2> "$tmp/error.err"; then
    fail "an unknown coding did not make the shell fail"
fi
grep -qxF "Runtime error near line 3: groupfit_coef: options: coding must be one of dummy, effect, weighted_effect, helmert, reverse_helmert, successive, polynomial, custom (not 'foo')" "$tmp/error.err" \
    || fail "unexpected error output: $(cat "$tmp/error.err")"

# A name that does not exist is refused (the .load above really looked up the file).
if "$shell" :memory: ".load $tmp/no_such_module" "SELECT 1" > /dev/null 2>&1; then
    fail ".load of a missing module succeeded"
fi

# --------------------------------------------------------- the demo database
# build_demo.sql reads datasets/*.csv relative to the source directory.
if ! (cd "$source_dir" && "$shell" "$tmp/demo.db" < datasets/build_demo.sql) > "$tmp/build.out" 2>&1; then
    fail "build_demo.sql failed: $(cat "$tmp/build.out")"
fi
demo=$("$shell" -bail "$tmp/demo.db" ".load $stem" \
    "SELECT rows_used, rows_dropped, dropped_null_response, dropped_null_group, dropped_null_covariate, levels
       FROM groupfit_summary((SELECT groupfit(minutes, carrier, distance_km, weight_kg) FROM deliveries));" \
    "SELECT count(*), sum(n) FROM groupfit_levels((SELECT groupfit(minutes, carrier) FROM deliveries));" \
    "SELECT s.depot_id, d.region, c.label FROM
       (SELECT depot_id, groupfit(minutes, carrier) AS model FROM deliveries GROUP BY depot_id) AS s
       JOIN depots AS d USING (depot_id), groupfit_coef(s.model) AS c
       WHERE c.term = 'intercept' ORDER BY s.depot_id;" 2>&1)
expected_demo='2357|43|12|7|24|5
5|2381
1|Fenward|intercept
2|Fenward|intercept
3|Fenward|intercept
4|Saltreach|intercept
5|Saltreach|intercept
6|Saltreach|intercept
7|Upper Marl|intercept
8|Upper Marl|intercept'
if [ "$demo" != "$expected_demo" ]; then
    fail "demo database output differs"
    diff -u <(echo "$expected_demo") <(echo "$demo")
fi

if [ $failed -ne 0 ]; then exit 1; fi
echo "test_shell: all checks passed"
