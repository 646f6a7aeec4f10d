#!/usr/bin/python3
"""make_multcomp_golden.py -- high-precision golden values for groupfit's
studentized range and Dunnett functions (core/multcomp.hpp).

Run from the repository root (about 27 CPU-minutes, run on 2 processes; 45
minutes of wall time on a busy 2-core machine):

    /usr/bin/python3 tests/oracle/make_multcomp_golden.py

Needs Debian's python3-mpmath (python3-gmpy2, if installed, makes mpmath about
twice as fast) and, for multcomp_scipy.csv only, python3-scipy. mpmath and scipy
are reference calculators here; nothing at run time depends on them.

Writes (format: '#' comment lines, then CSV with a header line):

  tests/oracle/golden/multcomp_srange.csv
      quantity,k,df,x,value
      quantity upper: P(Q > x); cdf: P(Q <= x); quantile: the q with
      P(Q <= q) = x. df is a number or 'inf'.
  tests/oracle/golden/multcomp_dunnett.csv
      quantity,sides,lambda,df,x,value
      sides two_sided: max_i |T_i|; one_sided: max_i T_i. lambda is the
      product-form factor vector, entries separated by ';'. quantity upper:
      P(max > x); cdf: P(max <= x); quantile: the c with P(max <= c) = x.
  tests/oracle/golden/multcomp_scipy.csv
      quantity,k,df,x,value   (scipy.stats.studentized_range cdf, sf, ppf)

Method (mp.dps = 30; every value is the defining integral, evaluated with
fixed composite Gauss-Legendre rules of 20 nodes per panel):

* Range of k standard normals, upper tail
      Wc(w) = k int phi(x) [Phi(x)^n - (Phi(x) - Phi(x-w))^n] dx,  n = k - 1,
  with a^n - (a-b)^n summed as a short binomial series when b/a < 1e-8 (no
  cancellation). The x-interval is where the concave envelope
  min(log k phi Phi^n, log k n phi Phi^(n-1) Phi(x-w)), which bounds the
  integrand within a factor e/(e-1), is within 55 of its maximum (found in
  double precision); panels are at most 0.75 wide.
* Studentized range, df finite: with w = q s,
      P(Q > q) = int_0^inf f_S(w/q) Wc(w) dw / q,
  f_S the density of S = sqrt(chi^2_df/df). The w-axis carries one fixed grid
  per k (a panel [0, 0.02], then panels growing by 8% up to w = 45, 20 nodes
  each), so Wc is evaluated once per node and reused for every df and q; the
  8% panels resolve the chi density for df = 1000 (relative sd 2.2%) at every
  scale. df = inf: Wc(q) directly. cdf = 1 - upper (at 30 digits).
* Dunnett, product form lambda: given Y = y and S = s, comparison i exceeds c
  with probability from Z_i = lambda_i Y + sqrt(1 - lambda_i^2) X_i:
      U(x) = int phi(y) [1 - prod_i d_i(x, y)] dy,   x = c s,
  d_i = Phi((x - lambda_i y)/sigma_i) - Phi((-x - lambda_i y)/sigma_i) (two-sided)
  or Phi((x - lambda_i y)/sigma_i) (one-sided), y over
  [-(max|lambda| x + 10), max|lambda| x + 10] in panels of width <= 1.5. df
  finite (5 to 60): a geometric grid in x = c s as above, panels growing by 10%
  up to x = 10.
* Quantiles: mpmath.findroot (Anderson-Bjorck on a bracket found by scanning).

Self-checks (the script stops if one fails; the achieved numbers go into the
header of each file):
* k = 2: Wc(w) = erfc(w/2) and P(Q > q) = P(|T_df| > q/sqrt 2) (regularized
  incomplete beta) for every df and q of the grid, relative error < 1e-20.
* Inner rule: Wc(w) with 0.5-wide panels of 24 nodes agrees to 1e-22.
* Dunnett with m = 1 equals the t distribution, and lambda = 0 at df = inf
  equals 1 - (2 Phi(c) - 1)^m (two-sided) and 1 - Phi(c)^m (one-sided).

Apart from the date on each golden file's first line the output is
deterministic; set SOURCE_DATE_EPOCH to fix the date as well.
"""

import datetime
import math
import os
import sys
import time
from multiprocessing import Pool

import mpmath
from mpmath import mp, mpf

DPS = 30
mp.dps = DPS

HERE = os.path.dirname(os.path.abspath(__file__))
GOLDEN = os.path.join(HERE, "golden")

K_GRID = [2, 3, 5, 10, 20, 50, 100, 200]
DF_GRID = [1, 2, 5, 10, 20, 60, 120, 1000, "inf"]
Q_GRID = [0.5, 1, 2, 3, 4, 5, 6, 8, 10, 15, 20]
Q_EXTRA_SMALL_DF = [40, 100, 1000]  # for df <= 2 (heavy tails)
P_GRID = ["0.9", "0.95", "0.99"]

DUNNETT_CONFIGS = [
    # (name, lambda list as strings)
    ("m1", ["0.5"]),
    ("m2_balanced", ["0.70710678118654752440084436210484903928"] * 2),
    ("m3_unequal", None),  # sqrt(n_i / (n_i + n_0)), n = (5, 10, 20), n_0 = 10
    ("m5_balanced", ["0.70710678118654752440084436210484903928"] * 5),
    ("m4_mixed", ["0.6", "-0.3", "0.8", "0.1"]),
    ("m10_half", ["0.5"] * 10),
    ("m3_independent", ["0", "0", "0"]),
]
D_DF_GRID = [5, 10, 20, 60, "inf"]
D_C_GRID = ["2", "2.5", "3", "4"]
D_LEVEL = "0.95"

SQ2 = math.sqrt(2.0)
LN_SQRT_2PI = 0.5 * math.log(2 * math.pi)


# ---------------------------------------------------------------------------
# Double-precision helpers, used only to choose integration intervals
# ---------------------------------------------------------------------------

def log_ndtr(x):
    if x > 0:
        return math.log1p(-0.5 * math.erfc(x / SQ2))
    if x > -35:
        return math.log(0.5 * math.erfc(-x / SQ2))
    z = 1.0 / (x * x)
    return -0.5 * x * x - LN_SQRT_2PI - math.log(-x) + math.log1p(-z + 3 * z * z - 15 * z ** 3)


def golden_max(f, a, b, it=80):
    g = (math.sqrt(5) - 1) / 2
    x1, x2 = b - g * (b - a), a + g * (b - a)
    f1, f2 = f(x1), f(x2)
    for _ in range(it):
        if f1 < f2:
            a, x1, f1 = x1, x2, f2
            x2 = a + g * (b - a)
            f2 = f(x2)
        else:
            b, x2, f2 = x2, x1, f1
            x1 = b - g * (b - a)
            f1 = f(x1)
    return (x1, f1) if f1 > f2 else (x2, f2)


def drop_point(f, mode, top, drop, direction):
    inner, step = mode, 1.0
    outer = mode + direction * step
    while f(outer) >= top - drop:
        inner, step = outer, step * 2
        outer = mode + direction * step
    for _ in range(30):
        mid = 0.5 * (inner + outer)
        if f(mid) >= top - drop:
            inner = mid
        else:
            outer = mid
    return outer


def max_mode(k):
    """Mode of the density of the maximum of k normals: -x + n phi/Phi = 0."""
    n = k - 1
    a, b = -3.0, 10.0
    for _ in range(200):
        x = 0.5 * (a + b)
        g = -x + n * math.exp(-0.5 * x * x - LN_SQRT_2PI - log_ndtr(x))
        if g > 0:
            a = x
        else:
            b = x
    return 0.5 * (a + b)


def range_interval(k, w, xf, drop=55.0):
    """Interval carrying Wc's integrand, from its concave envelope."""
    n = k - 1
    lk, ln_ = math.log(k), math.log(n)

    def env(x):
        lp = log_ndtr(x)
        a = lk - 0.5 * x * x - LN_SQRT_2PI + n * lp
        b = lk + ln_ - 0.5 * x * x - LN_SQRT_2PI + (n - 1) * lp + log_ndtr(x - w)
        return min(a, b)

    lo0, hi0 = min(xf, 0.5 * w) - 14, max(xf, 0.5 * w) + 14
    mode, top = golden_max(env, lo0, hi0)
    return drop_point(env, mode, top, drop, -1), drop_point(env, mode, top, drop, +1)


# ---------------------------------------------------------------------------
# High-precision pieces
# ---------------------------------------------------------------------------

_GL = {}


def gauss_legendre(n):
    """Nodes and weights of the n-point Gauss-Legendre rule on [-1, 1]."""
    if n in _GL:
        return _GL[n]
    xs, ws = [], []
    for i in range(1, n + 1):
        x = mp.cos(mp.pi * (i - mpf(1) / 4) / (n + mpf(1) / 2))
        for _ in range(100):
            p0, p1 = mpf(1), x
            for j in range(2, n + 1):
                p0, p1 = p1, ((2 * j - 1) * x * p1 - (j - 1) * p0) / j
            dp = n * (x * p1 - p0) / (x * x - 1)
            dx = p1 / dp
            x -= dx
            if abs(dx) < mpf(10) ** (-DPS - 8):
                break
        p0, p1 = mpf(1), x
        for j in range(2, n + 1):
            p0, p1 = p1, ((2 * j - 1) * x * p1 - (j - 1) * p0) / j
        dp = n * (x * p1 - p0) / (x * x - 1)
        xs.append(x)
        ws.append(2 / ((1 - x * x) * dp * dp))
    _GL[n] = (xs, ws)
    return _GL[n]


def panel_rule(a, b, width, nodes):
    """Composite Gauss-Legendre nodes/weights on [a, b] (mpf), panels <= width."""
    a, b = mpf(a), mpf(b)
    p = max(1, int(math.ceil(float(b - a) / width)))
    xs, ws = gauss_legendre(nodes)
    out = []
    h = (b - a) / p
    for i in range(p):
        lo = a + i * h
        for x, w in zip(xs, ws):
            out.append((lo + h * (x + 1) / 2, w * h / 2))
    return out


SQRT2 = mp.sqrt(2)
INV_SQRT_2PI = 1 / mp.sqrt(2 * mp.pi)


def Phi(x):
    return mp.erfc(-x / SQRT2) / 2


def pow_diff(a, b, n):
    """a^n - (a-b)^n for 0 <= b <= a, without cancellation."""
    if n == 1:
        return b
    r = b / a
    if r > mpf("1e-8"):
        return a ** n - (a - b) ** n
    # a^n (1 - (1-r)^n) = a^n sum_{j>=1} (-1)^(j+1) C(n, j) r^j
    term, s, j = n * r, mpf(0), 1
    while True:
        s += term
        if abs(term) < abs(s) * mpf(10) ** (-DPS - 4) or j >= n:
            break
        term *= -(n - j) * r / (j + 1)
        j += 1
    return a ** n * s


def range_tail(k, w, xf, width=0.75, nodes=20):
    """Wc(w) = P(range of k standard normals > w)."""
    w = mpf(w)
    if w <= 0:
        return mpf(1)
    n = k - 1
    lo, hi = range_interval(k, float(w), xf)
    total = mpf(0)
    for x, wt in panel_rule(lo, hi, width, nodes):
        total += wt * k * INV_SQRT_2PI * mp.exp(-x * x / 2) * pow_diff(Phi(x), Phi(x - w), n)
    return total


def w_grid(ratio="1.08", top=45):
    """The fixed outer grid in w (or x = c s): nodes and weights."""
    out = panel_rule(0, mpf("0.02"), 1, 20)
    a = mpf("0.02")
    while a < top:
        b = a * mpf(ratio)
        out += panel_rule(a, b, 1, 20)
        a = b
    return out


def log_chi_const(df):
    """log of 2 (df/2)^(df/2) / Gamma(df/2), the constant of f_S."""
    v = mpf(df)
    return mp.log(2) + (v / 2) * mp.log(v / 2) - mp.loggamma(v / 2)


def outer_sum(table, df, q):
    """int f_S(w/q) T(w) dw / q over the grid; table = [(w, log(weight*T(w)))]."""
    v, q = mpf(df), mpf(q)
    c = log_chi_const(df) - v * mp.log(q)
    b = v / (2 * q * q)
    total = mpf(0)
    for w, lwt, lw in table:
        e = c + (v - 1) * lw - b * w * w + lwt
        if e > -2000:
            total += mp.exp(e)
    return total


def find_root(f, target, x0, decreasing=True):
    """x with f(x) = target for monotone f: bracket by scanning, then
    mpmath.findroot (Anderson-Bjorck)."""
    g = (lambda x: f(x) - target) if decreasing else (lambda x: target - f(x))
    a = mpf(x0)
    ga = g(a)
    step = mpf("1.25")
    if ga > 0:
        b = a * step
        gb = g(b)
        while gb > 0:
            a, ga = b, gb
            b = b * step
            gb = g(b)
    else:
        b, gb = a, ga
        a = b / step
        ga = g(a)
        while ga < 0:
            b, gb = a, ga
            a = a / step
            ga = g(a)
    return mp.findroot(g, (a, b), solver="anderson", tol=mpf(10) ** (-2 * DPS + 10))


def t_upper_two_sided(t, df):
    """P(|T_df| > t) by the regularized incomplete beta function."""
    v, t = mpf(df), mpf(t)
    return mp.betainc(v / 2, mpf(1) / 2, 0, v / (v + t * t), regularized=True)


# ---------------------------------------------------------------------------
# Studentized range: one task per k
# ---------------------------------------------------------------------------

def srange_task(k):
    mp.dps = DPS
    t0 = time.time()
    xf = max_mode(k)
    rows, checks = [], {}
    # df = inf: direct.
    for q in Q_GRID:
        up = range_tail(k, q, xf)
        rows.append(("upper", k, "inf", q, up))
        rows.append(("cdf", k, "inf", q, 1 - up))
    for p in P_GRID:
        target = 1 - mpf(p)
        qq = find_root(lambda q: range_tail(k, q, xf), target, 4.0)
        rows.append(("quantile", k, "inf", p, qq))
    # Inner-rule check at a few w.
    worst_inner = mpf(0)
    for w in ["0.3", "2", "5.5", "12", "30"]:
        a = range_tail(k, w, xf)
        b = range_tail(k, w, xf, width=0.5, nodes=24)
        worst_inner = max(worst_inner, abs(a / b - 1))
        if k == 2:
            exact = mp.erfc(mpf(w) / 2)
            worst_inner = max(worst_inner, abs(a / exact - 1))
    checks["inner"] = worst_inner
    # Finite df: the grid in w.
    table = []
    for w, wt in w_grid():
        tail = range_tail(k, w, xf)
        if tail > 0:
            table.append((w, mp.log(wt * tail), mp.log(w)))
    worst_t = mpf(0)
    for df in DF_GRID:
        if df == "inf":
            continue
        qs = Q_GRID + (Q_EXTRA_SMALL_DF if df <= 2 else [])
        for q in qs:
            up = outer_sum(table, df, q)
            rows.append(("upper", k, df, q, up))
            rows.append(("cdf", k, df, q, 1 - up))
            if k == 2:
                exact = t_upper_two_sided(mpf(q) / SQRT2, df)
                worst_t = max(worst_t, abs(up / exact - 1))
        for p in P_GRID:
            target = 1 - mpf(p)
            qq = find_root(lambda q: outer_sum(table, df, q), target, 4.0)
            rows.append(("quantile", k, df, p, qq))
    checks["k2_t"] = worst_t
    return k, rows, checks, time.time() - t0


# ---------------------------------------------------------------------------
# Dunnett product form: one task per configuration
# ---------------------------------------------------------------------------

def dunnett_lambda(name, lam):
    if lam is not None:
        return [mpf(x) for x in lam]
    n0 = mpf(10)
    return [mp.sqrt(mpf(n) / (n + n0)) for n in (5, 10, 20)]


def dunnett_tails(lam, x):
    """(two-sided, one-sided) P(some comparison beyond x | S = 1)."""
    x = mpf(x)
    groups = {}
    for l in lam:
        groups[l] = groups.get(l, 0) + 1
    big = max(abs(float(l)) for l in lam)
    reach = big * float(x) + 10
    two, one = mpf(0), mpf(0)
    for y, wt in panel_rule(-reach, reach, 1.5, 20):
        p2, p1 = mpf(1), mpf(1)
        for l, mult in groups.items():
            s = mp.sqrt((1 - l) * (1 + l))
            up = Phi((x - l * y) / s)
            lo = Phi((-x - l * y) / s)
            p2 *= (up - lo) ** mult
            p1 *= up ** mult
        dens = wt * INV_SQRT_2PI * mp.exp(-y * y / 2)
        two += dens * (1 - p2)
        one += dens * (1 - p1)
    return two, one


def dunnett_task(cfg):
    mp.dps = DPS
    t0 = time.time()
    name, lam_s = cfg
    lam = dunnett_lambda(name, lam_s)
    lam_txt = ";".join(mp.nstr(l, 20) for l in lam)
    m = len(lam)
    rows, worst = [], mpf(0)
    # df = inf: direct.
    for c in D_C_GRID:
        two, one = dunnett_tails(lam, c)
        for sides, v in (("two_sided", two), ("one_sided", one)):
            rows.append(("upper", sides, lam_txt, "inf", c, v))
            rows.append(("cdf", sides, lam_txt, "inf", c, 1 - v))
        if all(l == 0 for l in lam):
            cc = mpf(c)
            worst = max(worst, abs(two / (1 - (2 * Phi(cc) - 1) ** m) - 1))
            worst = max(worst, abs(one / (1 - Phi(cc) ** m) - 1))
    for idx, sides in ((0, "two_sided"), (1, "one_sided")):
        target = 1 - mpf(D_LEVEL)
        cq = find_root(lambda c: dunnett_tails(lam, c)[idx], target, 2.0)
        rows.append(("quantile", sides, lam_txt, "inf", D_LEVEL, cq))
    # Finite df: grid in x = c s.
    tab2, tab1 = [], []
    for x, wt in w_grid("1.1", 10):
        two, one = dunnett_tails(lam, x)
        lx = mp.log(x)
        if two > 0:
            tab2.append((x, mp.log(wt * two), lx))
        if one > 0:
            tab1.append((x, mp.log(wt * one), lx))
    for df in D_DF_GRID:
        if df == "inf":
            continue
        for c in D_C_GRID:
            for sides, tab in (("two_sided", tab2), ("one_sided", tab1)):
                v = outer_sum(tab, df, c)
                rows.append(("upper", sides, lam_txt, df, c, v))
                rows.append(("cdf", sides, lam_txt, df, c, 1 - v))
                if m == 1:
                    exact = t_upper_two_sided(c, df)
                    if sides == "one_sided":
                        exact /= 2
                    worst = max(worst, abs(v / exact - 1))
        for sides, tab in (("two_sided", tab2), ("one_sided", tab1)):
            target = 1 - mpf(D_LEVEL)
            cq = find_root(lambda c: outer_sum(tab, df, c), target, 2.0)
            rows.append(("quantile", sides, lam_txt, df, D_LEVEL, cq))
    return name, rows, worst, time.time() - t0


# ---------------------------------------------------------------------------
# scipy.stats.studentized_range
# ---------------------------------------------------------------------------

def scipy_rows():
    import numpy as np
    import scipy
    from scipy.stats import studentized_range as sr
    rows = []
    for k in K_GRID:
        for df in DF_GRID:
            d = np.inf if df == "inf" else float(df)
            for q in [1, 2, 3, 4, 5, 6, 8, 12]:
                rows.append(("cdf", k, df, q, float(sr.cdf(q, k, d))))
                rows.append(("upper", k, df, q, float(sr.sf(q, k, d))))
            for p in P_GRID:
                rows.append(("quantile", k, df, p, float(sr.ppf(float(p), k, d))))
    return scipy.__version__, rows


# ---------------------------------------------------------------------------

def fmt(v):
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, mpmath.mpf):
        return mp.nstr(v, 20, min_fixed=-1, max_fixed=1) if v != 0 else "0"
    return str(v)


def stamp():
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    when = (datetime.datetime.fromtimestamp(int(epoch), datetime.timezone.utc) if epoch
            else datetime.datetime.now(datetime.timezone.utc))
    return when.strftime("%Y-%m-%d")


def write(path, header_lines, columns, rows):
    with open(path, "w") as f:
        for h in header_lines:
            f.write("# " + h + "\n")
        f.write(",".join(columns) + "\n")
        for r in rows:
            f.write(",".join(fmt(v) for v in r) + "\n")


def main():
    t0 = time.time()
    os.makedirs(GOLDEN, exist_ok=True)
    tasks = [("d", c) for c in DUNNETT_CONFIGS] + [("s", k) for k in reversed(K_GRID)]
    with Pool(2) as pool:
        results = pool.map(run_task, tasks, chunksize=1)
    srange, dunnett = {}, {}
    worst_inner = worst_t = worst_d = mpf(0)
    for kind, res in results:
        if kind == "s":
            k, rows, checks, secs = res
            srange[k] = rows
            worst_inner = max(worst_inner, checks["inner"])
            worst_t = max(worst_t, checks["k2_t"])
            print(f"k={k}: {len(rows)} values in {secs:.0f} s", file=sys.stderr)
        else:
            name, rows, worst, secs = res
            dunnett[name] = rows
            worst_d = max(worst_d, worst)
            print(f"dunnett {name}: {len(rows)} values in {secs:.0f} s", file=sys.stderr)
    problems = []
    if worst_inner > mpf("1e-22"):
        problems.append(f"inner rule check {mp.nstr(worst_inner, 3)}")
    if worst_t > mpf("1e-20"):
        problems.append(f"k = 2 against t {mp.nstr(worst_t, 3)}")
    if worst_d > mpf("1e-20"):
        problems.append(f"Dunnett identities {mp.nstr(worst_d, 3)}")
    if problems:
        sys.exit("self-check failed: " + "; ".join(problems))

    backend = mpmath.libmp.BACKEND
    common = [f"generated {stamp()} by tests/oracle/make_multcomp_golden.py",
              f"mpmath {mpmath.__version__} (backend {backend}), mp.dps = {DPS}; "
              "composite Gauss-Legendre, 20 nodes per panel (method in the script's docstring)"]
    write(os.path.join(GOLDEN, "multcomp_srange.csv"),
          common + ["studentized range Q = range of k N(0,1) / sqrt(chi2_df/df); "
                    "upper = P(Q > x), cdf = P(Q <= x), quantile: P(Q <= value) = x",
                    f"self-checks: k = 2 against P(|T_df| > q/sqrt 2) max rel {mp.nstr(worst_t, 3)}; "
                    f"inner rule (0.5-wide 24-node panels; erfc(w/2) at k = 2) max rel {mp.nstr(worst_inner, 3)}"],
          ["quantity", "k", "df", "x", "value"],
          [r for k in K_GRID for r in srange[k]])
    write(os.path.join(GOLDEN, "multcomp_dunnett.csv"),
          common + ["Dunnett, product-form correlation lambda_i lambda_j; two_sided: max |T_i|, "
                    "one_sided: max T_i; upper = P(max > x), cdf = P(max <= x), quantile: P(max <= value) = x",
                    "m3_unequal has lambda_i = sqrt(n_i/(n_i + 10)), n = (5, 10, 20)",
                    f"self-checks: m = 1 against t, lambda = 0 against independence, max rel {mp.nstr(worst_d, 3)}"],
          ["quantity", "sides", "lambda", "df", "x", "value"],
          [r for c in DUNNETT_CONFIGS for r in dunnett[c[0]]])
    try:
        ver, rows = scipy_rows()
        write(os.path.join(GOLDEN, "multcomp_scipy.csv"),
              [f"generated {stamp()} by tests/oracle/make_multcomp_golden.py",
               f"scipy {ver} scipy.stats.studentized_range: cdf, upper = sf, quantile = ppf"],
              ["quantity", "k", "df", "x", "value"], rows)
    except ImportError:
        print("scipy not available: multcomp_scipy.csv not written", file=sys.stderr)
    print(f"done in {time.time() - t0:.0f} s", file=sys.stderr)


def run_task(task):
    kind, arg = task
    return kind, (srange_task(arg) if kind == "s" else dunnett_task(arg))


if __name__ == "__main__":
    main()
