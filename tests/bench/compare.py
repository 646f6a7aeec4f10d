#!/usr/bin/python3
"""groupfit whole-process comparison: the extension against the plain-SQL floor
and the ways people fit the same model without it.

    python3 tests/bench/compare.py --rows 1000000 --levels 4 --covariates 2 \
        [--runs 5] [--segments N] [--workdir DIR] [--module PATH]

Builds (once, cached by its parameters in --workdir, default build/bench) a
table t(seg INTEGER, g TEXT, y REAL, x1 REAL, ..., xk REAL) with the sqlite3
shell, then times whole processes, one after the other and round-robin so that
machine noise falls on every method alike:

  floor            sqlite3: SELECT sum(y), sum(x1), ..., sum(xk) FROM t
  groupfit         sqlite3: .load MODULE; SELECT length(groupfit(y, g, x1..xk)) FROM t
  groupfit + coef  the same aggregate followed by groupfit_coef (dummy coding);
                   its coefficients are the reference for the agreement check
  GROUP BY sums    sqlite3: per g, count and the sums of y, the x's and all their
                   products, the query a data engineer would write; the script
                   then solves the normal equations in Python (that
                   post-processing is cheap and is not included in the time)
  statsmodels      python3 -c: pandas.read_sql through the sqlite3 module, then
                   statsmodels ols('y ~ C(g) + x1 + ...')            (if installed)
  R lm             Rscript: read.csv(pipe("sqlite3 -csv -header ...")) (or RSQLite
                   when installed), then lm(y ~ g + x1 + ...)          (if installed)

With --segments N (seg then has N distinct values) it also times
  SELECT seg, length(groupfit(y, g, x1)) FROM t GROUP BY seg
against SELECT seg, count(*), sum(y), sum(x1) FROM t GROUP BY seg.

Every time is wall-clock (time.perf_counter around the process), peak memory
is the process's maximum resident set (/usr/bin/time -f '%e %M'); both are the
median over --runs runs. Each method's dummy-coded coefficients (intercept =
mean of the first level in ascending order, one difference from it per other
level, then the slopes) are compared with groupfit's; the script exits 1 when a
method disagrees beyond its tolerance or fails, 0 otherwise. Timings are
reported, never asserted.

The data: a MINSTD (Park-Miller, multiplier 48271, modulus 2^31 - 1) stream with
a fixed seed, carried row to row by the recursive CTE, so every row's draws
are a pure function of its row number (no random()). Draw d of row i is
s_i * 48271^(d+1) mod (2^31 - 1), where s_i is the state of row i. With
u = draw / (2^31 - 1) and level k = draw mod L:
  g  = 'g' || k,            x_j = 10 u_j (+ 0.5 (k mod 3) for x1),
  y  = 1 + (37 k mod 101) / 10 + sum_j b_j x_j + 2 (u_a + u_b + u_c - 1.5),
  b_j = j for odd j, -j/2 for even j; seg = draw mod N (0 without --segments).
"""
from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]
GENERATOR_VERSION = 2          # bump when the table's contents change

MODULUS = 2147483647           # 2^31 - 1
MULTIPLIER = 48271
SEED = 20240601

TOL_NORMAL_EQUATIONS = 1e-6
TOL_FIT = 1e-9


# --------------------------------------------------------------------- data

def slope_true(j: int) -> float:
    return float(j) if j % 2 else -j / 2.0


def generation_sql(rows: int, levels: int, k: int, segments: int) -> str:
    draws = 1 + k + 3 + 1          # g, x1..xk, three for the noise, seg
    mult = [pow(MULTIPLIER, d + 1, MODULUS) for d in range(draws)]
    step = pow(MULTIPLIER, draws, MODULUS)

    def draw(d: int) -> str:
        return f"(s * {mult[d]} % {MODULUS})"

    def unif(d: int) -> str:
        return f"({draw(d)} / {float(MODULUS)!r})"

    lvl = f"({draw(0)} % {levels})"
    xs = []
    for j in range(1, k + 1):
        x = f"10.0 * {unif(j)}"
        if j == 1:
            x += f" + 0.5 * ({lvl} % 3)"
        xs.append(x)
    noise = f"2.0 * ({unif(k + 1)} + {unif(k + 2)} + {unif(k + 3)} - 1.5)"
    y = f"1.0 + ({lvl} * 37 % 101) / 10.0"
    for j, x in enumerate(xs, start=1):
        y += f" + ({slope_true(j)!r}) * ({x})"
    y += f" + {noise}"
    seg = f"{draw(k + 4)} % {segments}" if segments > 0 else "0"
    cols = ", ".join(f"x{j} REAL" for j in range(1, k + 1))
    select = ", ".join([seg, f"'g' || {lvl}", y] + xs)
    return f"""PRAGMA journal_mode = OFF;
PRAGMA synchronous = OFF;
PRAGMA page_size = 4096;
CREATE TABLE t(seg INTEGER, g TEXT, y REAL{', ' + cols if cols else ''});
WITH RECURSIVE r(i, s) AS (
  SELECT 1, {SEED}
  UNION ALL
  SELECT i + 1, s * {step} % {MODULUS} FROM r WHERE i < {rows})
INSERT INTO t SELECT {select} FROM r;
"""


def ensure_table(args) -> Path:
    args.workdir.mkdir(parents=True, exist_ok=True)
    name = (f"t_r{args.rows}_l{args.levels}_k{args.covariates}_s{args.segments}"
            f"_v{GENERATOR_VERSION}.db")
    db = args.workdir / name
    if db.exists():
        print(f"table: {db} (cached)")
        return db
    tmp = db.with_suffix(".db.tmp")
    tmp.unlink(missing_ok=True)
    print(f"table: generating {db} ...", flush=True)
    t0 = time.perf_counter()
    r = subprocess.run([args.sqlite3, "-init", "/dev/null", "-batch", "-bail", str(tmp)],
                       input=generation_sql(args.rows, args.levels, args.covariates,
                                            args.segments),
                       text=True, capture_output=True)
    if r.returncode != 0:
        tmp.unlink(missing_ok=True)
        sys.exit(f"table generation failed:\n{r.stderr}")
    os.replace(tmp, db)
    print(f"table: generated in {time.perf_counter() - t0:.1f} s, "
          f"{db.stat().st_size / 2**20:.0f} MiB", flush=True)
    return db


# ------------------------------------------------------------------ running

class Failed(Exception):
    pass


def timed(cmd: list[str], env: dict | None = None) -> tuple[float, float, str]:
    """Runs cmd; returns (wall seconds, peak RSS in MiB, stdout)."""
    with tempfile.NamedTemporaryFile("r", suffix=".time") as tf:
        full = ["/usr/bin/time", "-f", "%e %M", "-o", tf.name] + cmd
        t0 = time.perf_counter()
        r = subprocess.run(full, capture_output=True, text=True, env=env)
        wall = time.perf_counter() - t0
        lines = [ln for ln in open(tf.name).read().splitlines() if ln.strip()]
    if r.returncode != 0:
        raise Failed(f"exit status {r.returncode}: {r.stderr.strip()[-2000:]}")
    peak_kib = float(lines[-1].split()[1])
    return wall, peak_kib / 1024.0, r.stdout


def sqlite_cmd(args, db: Path, *statements: str, csv: bool = False) -> list[str]:
    cmd = [args.sqlite3, "-init", "/dev/null", "-batch", "-bail"]
    if csv:
        cmd.append("-csv")
    return cmd + [str(db), *statements]


class Method:
    def __init__(self, key, label, cmd, parse=None, tol=None, note="", env=None):
        self.key, self.label, self.cmd, self.parse = key, label, cmd, parse
        self.tol, self.note, self.env = tol, note, env
        self.walls: list[float] = []
        self.peaks: list[float] = []
        self.output: str | None = None
        self.error: str | None = None
        self.coef: dict | None = None
        self.max_rel: float | None = None

    def run_once(self):
        if self.error:
            return
        try:
            wall, peak, out = timed(self.cmd, self.env)
        except Failed as e:
            self.error = str(e)
            return
        self.walls.append(wall)
        self.peaks.append(peak)
        if self.output is None:
            self.output = out


# ------------------------------------------------ coefficients of each method

def parse_groupfit_coef(out: str, k: int) -> dict:
    coef = {}
    for line in out.splitlines():
        if not line.strip():
            continue
        term, label, est = line.rsplit(",", 2)
        if term == "intercept":
            coef["intercept"] = float(est)
        elif label == "slope":
            coef[term] = float(est)
        else:
            coef[label] = float(est)
    return coef


def solve(a: list[list[float]], b: list[float]) -> list[float]:
    """Gaussian elimination with partial pivoting (a is small: p x p)."""
    n = len(b)
    m = [row[:] + [b[i]] for i, row in enumerate(a)]
    for c in range(n):
        piv = max(range(c, n), key=lambda r: abs(m[r][c]))
        m[c], m[piv] = m[piv], m[c]
        for r in range(c + 1, n):
            f = m[r][c] / m[c][c]
            for j in range(c, n + 1):
                m[r][j] -= f * m[c][j]
    x = [0.0] * n
    for c in reversed(range(n)):
        x[c] = (m[c][n] - sum(m[c][j] * x[j] for j in range(c + 1, n))) / m[c][c]
    return x


def groupby_columns(k: int) -> list[str]:
    """count, sums of y and the x's, then the upper triangle of products over
    [x1..xk, y] (x_i x_j for i <= j, x_i y, y y)."""
    v = [f"x{j}" for j in range(1, k + 1)] + ["y"]
    cols = ["count(*)"] + [f"sum({c})" for c in v]
    for i in range(len(v)):
        for j in range(i, len(v)):
            cols.append(f"sum({v[i]}*{v[j]})")
    return cols


def parse_groupby(out: str, k: int) -> dict:
    """Dummy-coded coefficients from per-level sums: the common slopes from the
    pooled within-level cross products, then level means adjusted for them."""
    q = k + 1
    groups = []
    for line in out.splitlines():
        if not line.strip():
            continue
        g, *nums = line.split(",")
        nums = [float(x) for x in nums]
        n, sums = nums[0], nums[1:1 + q]
        prods = nums[1 + q:]
        cross = [[0.0] * q for _ in range(q)]
        it = iter(prods)
        for i in range(q):
            for j in range(i, q):
                cross[i][j] = cross[j][i] = next(it)
        groups.append((g, n, sums, cross))
    groups.sort(key=lambda t: t[0].encode())          # SQLite BINARY order
    sxx = [[0.0] * k for _ in range(k)]
    sxy = [0.0] * k
    for _, n, sums, cross in groups:
        for i in range(k):
            for j in range(k):
                sxx[i][j] += cross[i][j] - sums[i] * sums[j] / n
            sxy[i] += cross[i][k] - sums[i] * sums[k] / n
    beta = solve(sxx, sxy) if k else []
    mu = {g: (sums[k] - sum(beta[j] * sums[j] for j in range(k))) / n
          for g, n, sums, _ in groups}
    base = groups[0][0]
    coef = {"intercept": mu[base]}
    for g, *_ in groups[1:]:
        coef[g] = mu[g] - mu[base]
    for j in range(k):
        coef[f"x{j + 1}"] = beta[j]
    return coef


def parse_statsmodels(out: str, k: int) -> dict:
    coef = {}
    for name, v in json.loads(out.strip().splitlines()[-1]).items():
        if name == "Intercept":
            coef["intercept"] = v
        elif name.startswith("C(g)[T.") and name.endswith("]"):
            coef[name[len("C(g)[T."):-1]] = v
        else:
            coef[name] = v
    return coef


def parse_r(out: str, k: int) -> dict:
    coef = {}
    covs = {f"x{j}" for j in range(1, k + 1)}
    for line in out.splitlines():
        if "\t" not in line:
            continue
        name, v = line.split("\t")
        v = float(v)                              # NA -> nan
        if name == "(Intercept)":
            coef["intercept"] = v
        elif name in covs:
            coef[name] = v
        elif name.startswith("g"):
            coef[name[1:]] = v
    return coef


STATSMODELS_SCRIPT = r"""
import json, sqlite3, sys
import pandas as pd
import statsmodels.formula.api as smf
db, cols = sys.argv[1], sys.argv[2:]
con = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
df = pd.read_sql("SELECT " + ", ".join(["g", "y"] + cols) + " FROM t", con)
res = smf.ols("y ~ " + " + ".join(["C(g)"] + cols), data=df).fit()
print(json.dumps({n: float(v) for n, v in res.params.items()}))
"""

R_SCRIPT = r"""
args <- commandArgs(TRUE); sqlite3 <- args[1]; db <- args[2]; cols <- args[-(1:2)]
q <- paste("select", paste(c("g", "y", cols), collapse = ","), "from t")
if (requireNamespace("RSQLite", quietly = TRUE)) {
  con <- DBI::dbConnect(RSQLite::SQLite(), db, flags = RSQLite::SQLITE_RO)
  d <- DBI::dbGetQuery(con, q)
} else {
  d <- read.csv(pipe(paste(shQuote(sqlite3), "-init /dev/null -batch -csv -header", shQuote(db), shQuote(q))))
}
d$g <- factor(d$g, levels = sort(unique(d$g), method = "radix"))
f <- lm(reformulate(c("g", cols), "y"), data = d)
cf <- coef(f)
cat(sprintf("%s\t%.17g\n", names(cf), cf), sep = "")
"""


def available_python(python: str) -> str | None:
    """None when pandas and statsmodels import, else the reason."""
    if not python or not Path(python).exists():
        return f"{python or 'python3'} not found"
    r = subprocess.run([python, "-c", "import pandas, statsmodels.formula.api"],
                       capture_output=True, text=True)
    return None if r.returncode == 0 else "pandas/statsmodels not installed for " + python


def rel_diff(got: dict, ref: dict) -> float:
    """max |got - ref| / max(|ref|, 1e-3 max|ref|) over ref's coefficients
    (the floor keeps a coefficient that happens to be near 0 from dominating)."""
    if set(got) != set(ref):
        missing = sorted(set(ref) - set(got))[:5]
        extra = sorted(set(got) - set(ref))[:5]
        raise ValueError(f"different coefficients (missing {missing}, extra {extra})")
    scale = 1e-3 * max(abs(v) for v in ref.values())
    worst = 0.0
    for name, r in ref.items():
        g = got[name]
        if math.isnan(g):
            return math.inf
        worst = max(worst, abs(g - r) / max(abs(r), scale))
    return worst


# --------------------------------------------------------------------- main

def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--levels", type=int, default=4)
    ap.add_argument("--covariates", type=int, default=2)
    ap.add_argument("--runs", type=int, default=5, help="runs per method (median reported)")
    ap.add_argument("--segments", type=int, default=0,
                    help="also time GROUP BY seg with this many segments")
    ap.add_argument("--workdir", type=Path, default=REPO / "build" / "bench")
    ap.add_argument("--module", type=Path, default=REPO / "build" / "release" / "groupfit.so")
    ap.add_argument("--sqlite3", default=shutil.which("sqlite3") or "sqlite3")
    ap.add_argument("--python", default="/usr/bin/python3",
                    help="interpreter for the statsmodels baseline")
    ap.add_argument("--rscript", default=shutil.which("Rscript") or "")
    ap.add_argument("--max-design-mib", type=float, default=2048,
                    help="skip statsmodels and R when the dense design matrix "
                         "(rows x (levels + covariates)) would exceed this")
    ap.add_argument("--no-baselines", action="store_true",
                    help="time only the SQL methods (skip statsmodels and R)")
    args = ap.parse_args()
    if args.rows < 1 or args.levels < 1 or args.covariates < 0 or args.runs < 1:
        ap.error("--rows, --levels, --runs must be >= 1 and --covariates >= 0")
    if args.segments and args.covariates < 1:
        ap.error("--segments needs --covariates >= 1 (the query uses x1)")
    if not args.module.exists():
        sys.exit(f"module not found: {args.module} (build it: cmake --build --preset release)")
    if not Path("/usr/bin/time").exists():
        sys.exit("/usr/bin/time is needed for peak memory (Debian package: time)")

    k = args.covariates
    db = ensure_table(args)
    xs = [f"x{j}" for j in range(1, k + 1)]
    load = f".load {args.module}"
    agg = "groupfit(" + ", ".join(["y", "g"] + xs) + ")"
    names = "names=" + ", ".join(["g"] + xs)

    methods = [
        Method("floor", f"floor: sum of {k + 1} columns",
               sqlite_cmd(args, db, "SELECT " + ", ".join(f"sum({c})" for c in ["y"] + xs)
                          + " FROM t")),
        Method("groupfit", "groupfit aggregate",
               sqlite_cmd(args, db, load, f"SELECT length({agg}) FROM t")),
        Method("coef", "groupfit + coef report",
               sqlite_cmd(args, db, load,
                          "SELECT c.term, c.label, printf('%!.17g', c.estimate) "
                          f"FROM (SELECT {agg} AS m FROM t) AS s, "
                          f"groupfit_coef(s.m, '{names}') AS c", csv=True),
               parse=parse_groupfit_coef),
        Method("groupby", "GROUP BY sums (+ solve)",
               sqlite_cmd(args, db, "SELECT g, " + ", ".join(groupby_columns(k))
                          + " FROM t GROUP BY g", csv=True),
               parse=parse_groupby, tol=TOL_NORMAL_EQUATIONS,
               note="time excludes the normal-equation solve done afterwards in Python"),
    ]

    skipped = []
    design_mib = args.rows * (args.levels + k + 1) * 8 / 2**20
    if args.no_baselines:
        skipped.append("statsmodels and R: --no-baselines")
    elif design_mib > args.max_design_mib:
        skipped.append(f"statsmodels and R: the dense design matrix would take "
                       f"{design_mib:.0f} MiB (> --max-design-mib {args.max_design_mib:.0f})")
    else:
        why = available_python(args.python)
        if why:
            skipped.append(f"statsmodels: {why}")
        else:
            methods.append(Method("statsmodels", "statsmodels ols (pandas)",
                                  [args.python, "-c", STATSMODELS_SCRIPT, str(db), *xs],
                                  parse=parse_statsmodels, tol=TOL_FIT))
        if not args.rscript:
            skipped.append("R: Rscript not found")
        else:
            env = dict(os.environ, LC_ALL="C")
            methods.append(Method("r", "R lm", [args.rscript, "--vanilla", "-e", R_SCRIPT,
                                                args.sqlite3, str(db), *xs],
                                  parse=parse_r, tol=TOL_FIT, env=env,
                                  note="peak is the larger of R and its sqlite3 child"))

    seg_methods = []
    if args.segments:
        seg_methods = [
            Method("seg_floor", f"GROUP BY seg: count + sums",
                   sqlite_cmd(args, db, "SELECT seg, count(*), sum(y), sum(x1) "
                              "FROM t GROUP BY seg")),
            Method("seg_groupfit", f"GROUP BY seg: groupfit",
                   sqlite_cmd(args, db, load, "SELECT seg, length(groupfit(y, g, x1)) "
                              "FROM t GROUP BY seg")),
        ]

    print(f"rows {args.rows:,}, levels {args.levels:,}, covariates {k}, "
          f"segments {args.segments or '-'}, runs {args.runs} (median), "
          f"module {args.module}", flush=True)
    # Warm the page cache so that the first timed run is not the only cold one.
    subprocess.run(methods[0].cmd, capture_output=True)
    for run in range(args.runs):
        for m in methods + seg_methods:
            m.run_once()
        print(f"  run {run + 1}/{args.runs} done", flush=True)

    # Agreement: every method's coefficients against groupfit's.
    status = 0
    ref = None
    coef = methods[2]
    if coef.error is None and coef.output is not None:
        ref = coef.parse(coef.output, k)
    for m in methods:
        if m.parse is None or m is coef or m.error or m.output is None or ref is None:
            continue
        try:
            m.coef = m.parse(m.output, k)
            m.max_rel = rel_diff(m.coef, ref)
        except (ValueError, KeyError, IndexError) as e:
            m.error = f"could not compare coefficients: {e}"

    floor = statistics.median(methods[0].walls) if methods[0].walls else math.nan
    floor_peak = statistics.median(methods[0].peaks) if methods[0].peaks else math.nan

    def row(m: Method, base: float, base_peak: float) -> str:
        if m.error:
            return f"{m.label:<30} FAILED: {m.error}"
        wall = statistics.median(m.walls)
        peak = statistics.median(m.peaks)
        if m is coef:
            agree = "reference" if ref else "-"
            rel = tol = ""
        elif m.max_rel is not None:
            ok = m.max_rel <= m.tol
            agree = "yes" if ok else "NO"
            rel, tol = f"{m.max_rel:.1e}", f"{m.tol:.0e}"
        else:
            agree = rel = tol = ""
        return (f"{m.label:<30} {wall:>9.3f} {wall / base:>8.2f} {peak:>9.1f} "
                f"{peak - base_peak:>+8.1f} {rel:>12} {tol:>6} {agree:>9}")

    header = (f"{'method':<30} {'median s':>9} {'x floor':>8} {'peak MiB':>9} "
              f"{'vs floor':>8} {'max rel diff':>12} {'tol':>6} {'agrees':>9}")
    print()
    print(header)
    print("-" * len(header))
    for m in methods:
        print(row(m, floor, floor_peak))
    if seg_methods:
        sf = seg_methods[0]
        sbase = statistics.median(sf.walls) if sf.walls else math.nan
        speak = statistics.median(sf.peaks) if sf.peaks else math.nan
        print()
        print(f"segments: {args.segments:,} distinct seg values; ratios against the first row")
        for m in seg_methods:
            print(row(m, sbase, speak))
    print()
    print("notes:")
    print(f"  time = wall seconds of the whole process, peak = max RSS (/usr/bin/time %M); "
          f"medians of {args.runs} runs")
    print("  max rel diff = max over coefficients of |b - b_groupfit| / "
          "max(|b_groupfit|, 1e-3 max|b_groupfit|); dummy coding, base = first level ascending")
    for m in methods + seg_methods:
        if m.note:
            print(f"  {m.label}: {m.note}")
    for s in skipped:
        print(f"  skipped {s}")
    if ref:
        slopes = ", ".join(f"{x}={ref[x]:.6g} (true {slope_true(j + 1):g})"
                           for j, x in enumerate(xs))
        print(f"  groupfit: intercept={ref['intercept']:.6g}"
              + (f", {slopes}" if slopes else ""))

    for m in methods + seg_methods:
        if m.error:
            status = 1
        elif m.max_rel is not None and not m.max_rel <= m.tol:
            status = 1
    if ref is None:
        status = 1
    print()
    print("result:", "all methods agree" if status == 0 else "FAILURE (see above)")
    return status


if __name__ == "__main__":
    sys.exit(main())
