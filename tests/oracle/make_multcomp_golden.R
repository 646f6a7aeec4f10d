# make_multcomp_golden.R -- R reference values for groupfit's studentized range
# and Dunnett functions (core/multcomp.hpp).
#
# Run from the repository root:
#     Rscript tests/oracle/make_multcomp_golden.R
#
# Uses base R's ptukey/qtukey and, when the Debian package r-cran-mvtnorm is
# installed, mvtnorm's pmvt/pmvnorm/qmvt for Dunnett's many-to-one statistics
# (without it only the studentized range rows are written). R is a reference
# calculator only; the accurate reference is the mpmath file written by
# make_multcomp_golden.py. R's ptukey is known to be inaccurate for small df
# (at df = 2 it is off by up to 4e-3; the tests compare it only for df >= 10),
# and mvtnorm's values are randomized quasi-Monte Carlo estimates whose error
# estimate is written beside each value.
#
# Output: tests/oracle/golden/multcomp_r.csv, '#' comment lines then CSV
#     quantity,k,corr,df,x,value,error
# quantity: srange_cdf / srange_upper (x = q), srange_quantile (x = p);
#           dunnett_two_sided_cdf / dunnett_one_sided_cdf (x = c: P(max |T_i| <= c)
#           or P(max T_i <= c)), dunnett_two_sided_quantile /
#           dunnett_one_sided_quantile (x = level, value = c).
# k: number of means (studentized range) or of comparisons m (Dunnett).
# corr: the m x m correlation matrix, row-major, entries separated by ';'.
# df: a number or 'inf'. error: mvtnorm's error estimate (empty for ptukey).
#
# Everything is deterministic (fixed seed for mvtnorm) except the date on the
# first line; set SOURCE_DATE_EPOCH to fix it.

options(warn = 1)

script_path <- local({
  a <- grep("^--file=", commandArgs(trailingOnly = FALSE), value = TRUE)
  if (length(a) == 1L) normalizePath(sub("^--file=", "", a)) else
    normalizePath("tests/oracle/make_multcomp_golden.R", mustWork = FALSE)
})
golden_dir <- file.path(dirname(script_path), "golden")
dir.create(golden_dir, showWarnings = FALSE)

stamp <- local({
  e <- Sys.getenv("SOURCE_DATE_EPOCH")
  t <- if (nzchar(e)) as.POSIXct(as.numeric(e), origin = "1970-01-01", tz = "UTC") else Sys.time()
  format(t, "%Y-%m-%d", tz = "UTC")
})

num <- function(x) {
  # Shortest of 15, 16 or 17 significant digits that reads back exactly.
  vapply(x, function(v) {
    if (is.infinite(v)) return(if (v > 0) "inf" else "-inf")
    for (d in 15:17) {
      s <- formatC(v, digits = d, format = "g")
      if (as.numeric(s) == v) return(trimws(s))
    }
    trimws(formatC(v, digits = 17, format = "g"))
  }, "")
}

rows <- list()
add <- function(quantity, k, corr, df, x, value, error = NA) {
  rows[[length(rows) + 1L]] <<- data.frame(
    quantity = quantity, k = k, corr = corr,
    df = if (is.infinite(df)) "inf" else num(df),
    x = num(x), value = num(value),
    error = if (is.na(error)) "" else num(error), stringsAsFactors = FALSE)
}

# --- studentized range: ptukey / qtukey --------------------------------------
k_grid <- c(2, 3, 5, 10, 20, 50, 100, 200)
df_grid <- c(2, 5, 10, 20, 60, 120, 1000, Inf)
q_grid <- c(1, 2, 3, 4, 5, 6, 8, 12)
p_grid <- c(0.9, 0.95, 0.99)
for (k in k_grid) for (df in df_grid) {
  for (q in q_grid) {
    add("srange_cdf", k, "", df, q, ptukey(q, k, df))
    add("srange_upper", k, "", df, q, ptukey(q, k, df, lower.tail = FALSE))
  }
  for (p in p_grid) add("srange_quantile", k, "", df, p, qtukey(p, k, df))
}

# --- Dunnett: mvtnorm ---------------------------------------------------------
have_mvtnorm <- requireNamespace("mvtnorm", quietly = TRUE)
mvt_version <- if (have_mvtnorm) as.character(packageVersion("mvtnorm")) else "not installed"
if (have_mvtnorm) {
  product <- function(l) { r <- outer(l, l); diag(r) <- 1; r }
  lam_unequal <- sqrt(c(5, 10, 20) / (c(5, 10, 20) + 10))
  configs <- list(
    product(rep(sqrt(0.5), 2)),
    product(lam_unequal),
    product(rep(sqrt(0.5), 5)),
    product(c(0.6, -0.3, 0.8, 0.1)),
    # Not of product form (the QMC path of groupfit): a 4 x 4 matrix and a
    # 3 x 3 one whose signs no lambda can produce.
    matrix(c(1, 0.5, 0.5, 0.2,
             0.5, 1, 0.5, 0.5,
             0.5, 0.5, 1, 0.5,
             0.2, 0.5, 0.5, 1), 4, 4),
    matrix(c(1, 0.4, 0.4,
             0.4, 1, -0.3,
             0.4, -0.3, 1), 3, 3))
  algo <- mvtnorm::GenzBretz(maxpts = 1e6, abseps = 1e-6, releps = 0)
  # qmvt searches the root on noisy estimates; finer settings only cost time.
  algo_q <- mvtnorm::GenzBretz(maxpts = 1e5, abseps = 1e-5, releps = 0)
  set.seed(20240611)
  for (ci in seq_along(configs)) {
    r <- configs[[ci]]
    m <- nrow(r)
    stopifnot(all(eigen(r, symmetric = TRUE, only.values = TRUE)$values > 0))
    corr_txt <- paste(num(as.vector(t(r))), collapse = ";")
    # The matrices not of product form take groupfit's (slower) QMC path: df 10 and inf only.
    df_set <- if (ci <= 4) c(5, 10, 20, 60, Inf) else c(10, Inf)
    for (df in df_set) {
      for (c in c(2, 2.5, 3)) {
        for (sides in c("two_sided", "one_sided")) {
          lower <- if (sides == "two_sided") rep(-c, m) else rep(-Inf, m)
          upper <- rep(c, m)
          p <- if (is.infinite(df)) {
            mvtnorm::pmvnorm(lower, upper, corr = r, algorithm = algo)
          } else {
            mvtnorm::pmvt(lower, upper, df = df, corr = r, algorithm = algo)
          }
          add(paste0("dunnett_", sides, "_cdf"), m, corr_txt, df, c, as.numeric(p), attr(p, "error"))
        }
      }
      if (df %in% c(10, Inf)) for (sides in c("two_sided", "one_sided")) {
        tail <- if (sides == "two_sided") "both.tails" else "lower.tail"
        qq <- mvtnorm::qmvt(0.95, tail = tail, df = if (is.infinite(df)) 0 else df, corr = r,
                            algorithm = algo_q)
        add(paste0("dunnett_", sides, "_quantile"), m, corr_txt, df, 0.95, qq$quantile,
            abs(qq$f.quantile))
      }
    }
  }
}

out <- do.call(rbind, rows)
path <- file.path(golden_dir, "multcomp_r.csv")
con <- file(path, "w")
writeLines(c(
  paste0("# generated ", stamp, " by tests/oracle/make_multcomp_golden.R"),
  paste0("# ", R.version.string, "; mvtnorm ", mvt_version,
         " (pmvt: GenzBretz maxpts = 1e6, abseps = 1e-6; qmvt: maxpts = 1e5, abseps = 1e-5; set.seed(20240611))"),
  "# ptukey/qtukey for df >= 2; pmvt (pmvnorm for df = inf) and qmvt for Dunnett",
  "# error: mvtnorm's error estimate; for quantiles |f.quantile|, the probability residual at the root"),
  con)
write.csv(out, con, row.names = FALSE, quote = FALSE)
close(con)
cat("wrote", nrow(out), "rows to", path, "\n")
