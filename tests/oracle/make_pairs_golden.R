# make_pairs_golden.R -- R reference values for groupfit's comparison reports
# (core/compare.hpp: pairs_report and contrast_report).
#
# Run from the repository root:
#     Rscript tests/oracle/make_pairs_golden.R [dataset ... | padjust]
# (no argument: every file; about 10 minutes, mostly pmvt and quadrature).
#
# Needs base R plus the Debian packages r-cran-multcomp and r-cran-mvtnorm.
# R is a reference calculator only: the options, column names and definitions
# are groupfit's (core/compare.hpp); this script computes the same quantities
# the way R users would, and writes them out.
#
# Sources, per quantity (the `source` column of every golden row names it):
#   estimate, std_error, t_stat, df, raw p_value
#                     multcomp::glht(lm, linfct = mcp(g = K)) with K the rows of
#                     our comparisons (a - b, or level - control), summary(test =
#                     adjusted("none")); alternative = "greater"/"less" for side=.
#                     Cross-checked in this script against mcp(g = "Tukey") and
#                     mcp(g = "Dunnett") on the relevelled factor. multcomp forms
#                     the raw p as 2 (1 - pt(|t|, df)), accurate to 2 ulp(1) only
#                     in absolute terms (its rows carry r_error = 2 eps); the raw p
#                     is also written from pt's tail, 2 pt(-|t|, df), accurate
#                     relatively.
#   p_adjusted        none: the raw p (both forms); bonferroni, holm: multcomp
#                     adjusted("...") (r_error m x 2 eps) and p.adjust on the pt
#                     tail p; bh: p.adjust(p, "BH") on the pt tail p; sidak:
#                     1 - (1 - p)^m (written as -expm1(m log1p(-p)), checked
#                     equal); tukey: ptukey(|t| sqrt 2, L, df, lower.tail = FALSE)
#                     with the model-based t (Tukey-Kramer, with covariates too)
#                     and, without covariates, TukeyHSD(aov); scheffe:
#                     pf(t^2 / (L - 1), L - 1, df, lower.tail = FALSE); dunnett:
#                     multcomp adjusted("single-step") (mvtnorm::pmvt, GenzBretz
#                     with the settings below, fixed seed) and, without
#                     covariates, the Dunnett (1955) product-form integral by
#                     adaptive quadrature (an independent check, ~1e-11).
#   ci_lower/upper    multcomp confint(glht, calpha = c) with c: univariate
#                     (none, holm, bh: qt), bonferroni qt(1 - alpha/(2m)) (one-sided
#                     qt(1 - alpha/m)), sidak qt(1 - (1 - conf^(1/m))/2) (one-sided
#                     qt(conf^(1/m))), tukey qtukey(conf, L, df) / sqrt(2), scheffe
#                     sqrt((L - 1) qf(conf, L - 1, df)), dunnett: the root of
#                     pmvt(...) = conf (uniroot, tol 1e-9, fixed seed; multcomp's
#                     own qmvt stops at ptol = 0.001, too coarse for a reference)
#                     and, without covariates, the root of the quadrature (tol
#                     1e-12). Each Dunnett case also has a crit_density row (d/dc
#                     of pmvt at the root) that the test uses to turn groupfit's
#                     stated p error into an error of its critical value.
#                     qtukey stops its secant iteration at eps = 1e-4, so the
#                     quantile is polished with uniroot on ptukey (tol 1e-13);
#                     TukeyHSD rows keep R's qtukey and carry its deviation as
#                     r_error.
#   contrast rows     glht(lm, linfct = Lmat) with Lmat = sum_i k_i (row of level i
#                     at the covariate values: means, or at=), the lsmeans-free
#                     manual L b; per row summary(test = adjusted("none")),
#                     confint(calpha = univariate_calpha()); joint row
#                     summary(test = Ftest()). Pure contrasts are cross-checked
#                     against mcp(g = K). The raw p is also written from pt's
#                     tail (multcomp's 2 (1 - pt) is accurate only absolutely).
#   padjust rows      p.adjust(p, "holm") and p.adjust(p, "BH") on fixed vectors.
#
# Reference-only rows (quantity names ending in _min / _max): multcomp's exact
# single-step all-pairs values (multivariate t with the model's correlation)
# for tukey. Tukey-Kramer equals them only for equal n without covariates (then
# they are written as ordinary p_adjusted / ci rows); otherwise it is
# conservative (Hayter 1984, for the one-way model; with covariates it is not a
# theorem, and the script checks it on these data before writing), so ours must
# satisfy p_adjusted >= p_adjusted_min, ci_lower <= ci_lower_max and
# ci_upper >= ci_upper_min.
#
# r_error: the reference value's own absolute error (3 x pmvt's error estimate,
# plus 1e-7 for Dunnett p-values; ptukey's absolute accuracy 2e-10 -- checked in this script against adaptive
# quadrature of the defining integral -- or qtukey's deviation); 0 when R's
# function is accurate to rounding. The C++ test adds it to its tolerance.
#
# Output: tests/oracle/golden/pairs_<dataset>.csv and pairs_padjust.csv,
# '#' header lines (R and package versions; data, model, rows, levels) then CSV
#     dataset,report,options,weights,level_a,level_b,row,quantity,value,r_error,source
# report: pairs | contrast | padjust. options: groupfit's options text (the
# test adds names=). Values are %.17g; Inf/-Inf for infinite interval ends;
# NA where R gives NA (padjust only).
#
# Everything is deterministic (fixed seeds) except the date on the first line;
# set SOURCE_DATE_EPOCH to fix it.

options(warn = 1, stringsAsFactors = FALSE)
suppressPackageStartupMessages({
  library(multcomp)
  library(mvtnorm)
})

script_path <- local({
  a <- grep("^--file=", commandArgs(trailingOnly = FALSE), value = TRUE)
  if (length(a) == 1L) normalizePath(sub("^--file=", "", a)) else
    normalizePath("tests/oracle/make_pairs_golden.R", mustWork = FALSE)
})
oracle_dir <- dirname(script_path)
repo_root  <- normalizePath(file.path(oracle_dir, "..", ".."))
golden_dir <- file.path(oracle_dir, "golden")
dir.create(golden_dir, showWarnings = FALSE, recursive = TRUE)

gen_date <- local({
  e <- Sys.getenv("SOURCE_DATE_EPOCH")
  if (nzchar(e)) format(as.POSIXct(as.numeric(e), origin = "1970-01-01", tz = "UTC"), "%Y-%m-%d")
  else format(Sys.Date(), "%Y-%m-%d")
})
versions <- sprintf("%s; multcomp %s; mvtnorm %s", R.version.string,
                    as.character(packageVersion("multcomp")),
                    as.character(packageVersion("mvtnorm")))

SEED <- 20261201L
# pmvt settings. The p-values use 1e6 points (error about 3e-7 in 4-5
# dimensions; 1e7 points take 20-30 s per call there and are not needed against
# groupfit's stated 1e-5 QMC error, and designs without covariates have the
# exact quadrature below); critical values are roots of pmvt with 2e5 points;
# multcomp's exact all-pairs reference (up to 15 dimensions, used only as a
# bound or cross-check) with 2e5 points.
GB <- GenzBretz(maxpts = 1e6, abseps = 1e-8, releps = 0)
GB_ROOT <- GenzBretz(maxpts = 2e5, abseps = 1e-8, releps = 0)
GB_REF <- GenzBretz(maxpts = 2e5, abseps = 1e-6, releps = 0)
PTUKEY_ERR <- 2e-10   # ptukey's absolute accuracy at these df (checked below)

fmt17 <- function(x) {
  out <- sprintf("%.17g", x)
  out[is.infinite(x) & x > 0] <- "Inf"
  out[is.infinite(x) & x < 0] <- "-Inf"
  out[is.na(x)] <- "NA"
  out
}
csv_quote <- function(s) {
  s <- as.character(s)
  s[is.na(s)] <- ""
  need <- grepl('[",\r\n]', s) | grepl("^\\s|\\s$", s)
  s[need] <- paste0('"', gsub('"', '""', s[need]), '"')
  s
}
sorted_levels <- function(x) {
  u <- unique(x[!is.na(x)])
  if (is.numeric(u)) sort(u) else sort(as.character(u), method = "radix")
}
stop_unless <- function(ok, what) if (!isTRUE(all(ok))) stop("self-check failed: ", what)
close_to <- function(a, b, tol) {
  a <- unname(as.numeric(a)); b <- unname(as.numeric(b))
  all(is.finite(a) == is.finite(b)) &&
    all(abs(a[is.finite(a)] - b[is.finite(b)]) <= tol * pmax(1, abs(b[is.finite(b)])))
}
# A level label as written in groupfit's options (quoted when needed).
quote_label <- function(s) {
  if (nzchar(s) && !grepl('[,;="/]', s) && !grepl("^\\s|\\s$", s)) return(s)
  paste0('"', gsub('"', '""', s), '"')
}

# ---------------------------------------------------------------------------
# Golden rows
# ---------------------------------------------------------------------------
rows <- NULL
add <- function(dataset, report, opts, weights, a, b, row, quantity, value, r_error, source) {
  n <- max(length(a), length(value))
  rows[[length(rows) + 1L]] <<- data.frame(
    dataset = dataset, report = report, options = opts, weights = weights,
    level_a = rep_len(a, n), level_b = rep_len(b, n), row = rep_len(as.character(row), n),
    quantity = quantity, value = fmt17(rep_len(value, n)),
    r_error = fmt17(rep_len(r_error, n)), source = source)
}
write_golden <- function(name, header) {
  out <- do.call(rbind, rows)
  path <- file.path(golden_dir, paste0("pairs_", name, ".csv"))
  lines <- c(header, paste(names(out), collapse = ","),
             do.call(paste, c(lapply(out, csv_quote), sep = ",")))
  con <- file(path, open = "wb")
  writeLines(lines, con, sep = "\n")
  close(con)
  message(sprintf("%-16s %5d golden rows -> %s", name, nrow(out), path))
  rows <<- NULL
}

# ---------------------------------------------------------------------------
# Independent check of ptukey's accuracy: the defining integral of the
# studentized range upper tail, by adaptive quadrature.
# P(Q > q) = int f_S(s) [1 - W(q s)] ds,
# 1 - W(w) = k int phi(x) [Phi(x)^(k-1) - (Phi(x) - Phi(x - w))^(k-1)] dx.
# ---------------------------------------------------------------------------
srange_upper_quad <- function(q, k, df) {
  U <- function(w) {
    f <- function(x) { a <- pnorm(x); b <- pmax(a - pnorm(x - w), 0)
                       k * dnorm(x) * (a^(k - 1) - b^(k - 1)) }
    integrate(f, -9, 9 + w, rel.tol = 1e-10, abs.tol = 1e-16, subdivisions = 1000L)$value
  }
  fs <- function(s) exp(log(2) + (df / 2) * log(df / 2) - lgamma(df / 2) + (df - 1) * log(s) -
                        df * s^2 / 2)
  g <- function(s) vapply(s, function(si) fs(si) * U(q * si), 0)
  integrate(g, max(0, 1 - 12 / sqrt(df)), 1 + 12 / sqrt(df), rel.tol = 1e-10,
            abs.tol = 1e-17, subdivisions = 1000L)$value
}
ptukey_checked <- function(q, k, df) {
  p <- ptukey(q, k, df, lower.tail = FALSE)
  for (i in seq_along(q)) {
    if (q[i] > 12) next   # far tail: both are ~0 at the 2e-10 scale
    ref <- srange_upper_quad(q[i], k, df)
    stop_unless(abs(p[i] - ref) <= PTUKEY_ERR,
                sprintf("ptukey(%g, %d, %g) = %.15g but quadrature gives %.15g", q[i], k, df, p[i], ref))
  }
  p
}
# The studentized range quantile: qtukey polished by uniroot on ptukey.
qtukey_precise <- function(p, k, df) {
  q0 <- qtukey(p, k, df)
  uniroot(function(q) ptukey(q, k, df) - p, c(q0 - 0.05, q0 + 0.05), tol = 1e-13)$root
}
# Density of the studentized range at q (for the quantile's error bound).
dtukey <- function(q, k, df, h = 1e-4) (ptukey(q + h, k, df) - ptukey(q - h, k, df)) / (2 * h)

# Dunnett critical value: P(max |T| <= c) = conf (two-sided) or P(max T <= c)
# = conf (one-sided), T multivariate t with correlation `corr`, by uniroot on
# pmvt (fixed seed, so pmvt is a smooth function of c). Returns the root, its
# error bound (3 x pmvt's error / density) and the density dP/dc there.
pmvt_at <- function(c, corr, df, two, alg) {
  m <- nrow(corr)
  set.seed(SEED)
  if (two) pmvt(lower = rep(-c, m), upper = rep(c, m), df = df, corr = corr, algorithm = alg)
  else pmvt(lower = rep(-Inf, m), upper = rep(c, m), df = df, corr = corr, algorithm = alg)
}
dunnett_crit <- function(conf, corr, df, two, alg = GB_ROOT, tol = 1e-9) {
  r <- uniroot(function(c) as.numeric(pmvt_at(c, corr, df, two, alg)) - conf, c(0.5, 8), tol = tol)
  c <- r$root
  err <- attr(pmvt_at(c, corr, df, two, alg), "error")
  h <- 1e-3
  dens <- (as.numeric(pmvt_at(c + h, corr, df, two, alg)) -
           as.numeric(pmvt_at(c - h, corr, df, two, alg))) / (2 * h)
  list(value = c, error = 3 * err / dens + tol, density = dens)
}

# Dunnett (1955) for a product-form correlation lambda_i lambda_j (one-way
# model without covariates: lambda_i = sqrt(n_i / (n_i + n_0))): with
# Z_i = lambda_i Y + sqrt(1 - lambda_i^2) X_i, the upper tail is
#   P(max T > c) = int f_S(s) int phi(y) [1 - prod_i (1 - q_i(y, s))] dy ds,
# q_i the conditional probability that comparison i exceeds c s. Adaptive
# quadrature (integrate), an independent check of pmvt at 1e-10.
dunnett_upper_quad <- function(c, lambda, df, two) {
  sq <- sqrt(1 - lambda^2)
  inner <- function(s) {
    f <- function(y) {
      ly <- outer(y, lambda)                       # length(y) x m
      q <- pnorm(sweep(c * s - ly, 2, sq, "/"), lower.tail = FALSE)
      if (two) q <- q + pnorm(sweep(-c * s - ly, 2, sq, "/"))
      -expm1(rowSums(log1p(-pmin(q, 1)))) * dnorm(y)
    }
    b <- c * s
    sum(vapply(list(c(-Inf, -b), c(-b, 0), c(0, b), c(b, Inf)), function(r)
      integrate(f, r[1], r[2], rel.tol = 1e-12, abs.tol = 0, subdivisions = 2000L)$value, 0))
  }
  fs <- function(s) exp(log(2) + (df / 2) * log(df / 2) - lgamma(df / 2) + (df - 1) * log(s) -
                        df * s^2 / 2)
  g <- function(s) vapply(s, function(si) fs(si) * inner(si), 0)
  integrate(g, max(0, 1 - 12 / sqrt(df)), 1 + 12 / sqrt(df), rel.tol = 1e-11, abs.tol = 0,
            subdivisions = 2000L)$value
}
QUAD_ERR <- 1e-11   # absolute error allowed for the quadrature (checked against pmvt)

# confint.glht with a given critical value (multcomp puts LowerCL = est + calpha
# se for alternative = "greater", so calpha is then the negative quantile).
ci_glht <- function(g, crit, conf) {
  calpha <- if (g$alternative == "greater") -crit else crit
  ci <- confint(g, level = conf, calpha = calpha)$confint
  list(lower = unname(ci[, "lwr"]), upper = unname(ci[, "upr"]))
}

# ---------------------------------------------------------------------------
# Pairs
# ---------------------------------------------------------------------------
# opts: list(adjust, vs (or NULL), side, conf, text)
pairs_case <- function(ds, fit, md, lev, opts) {
  L <- length(lev)
  conf <- opts$conf
  alpha <- 1 - conf
  alt <- switch(opts$side, two_sided = "two.sided", greater = "greater", less = "less")
  two <- alt == "two.sided"
  if (is.null(opts$vs)) {
    pr <- t(combn(L, 2))
  } else {
    c0 <- match(opts$vs, lev)
    pr <- cbind(setdiff(seq_len(L), c0), c0)
  }
  K <- t(apply(pr, 1, function(ab) { v <- numeric(L); v[ab[1]] <- 1; v[ab[2]] <- -1; v }))
  if (nrow(pr) == 1L) K <- matrix(K, nrow = 1)
  rownames(K) <- paste(lev[pr[, 1]], "-", lev[pr[, 2]])
  colnames(K) <- lev
  g <- glht(fit, linfct = mcp(g = K), alternative = alt)
  s0 <- summary(g, test = adjusted("none"))$test
  est <- unname(s0$coefficients); se <- unname(s0$sigma); tt <- unname(s0$tstat)
  raw <- unname(as.numeric(s0$pvalues)); df <- g$df
  m <- length(est)
  a <- lev[pr[, 1]]; b <- lev[pr[, 2]]
  src_glht <- sprintf("multcomp::glht(lm, mcp(g = K), alternative = \"%s\") summary(adjusted(\"none\"))", alt)

  # Cross-checks of the family against multcomp's own contrast matrices.
  if (is.null(opts$vs)) {
    gt <- glht(fit, linfct = mcp(g = "Tukey"))
    st <- summary(gt, test = adjusted("none"))$test
    stop_unless(close_to(-unname(st$coefficients), est, 1e-12) && close_to(unname(st$sigma), se, 1e-12),
                "mcp Tukey matches the K rows")
  } else {
    md2 <- md
    md2$g <- relevel(md2$g, ref = opts$vs)
    fit2 <- lm(formula(fit), data = md2, weights = .w)
    gd <- glht(fit2, linfct = mcp(g = "Dunnett"), alternative = alt)
    sd <- summary(gd, test = adjusted("none"))$test
    stop_unless(close_to(unname(sd$coefficients), est, 1e-9) && close_to(unname(sd$sigma), se, 1e-9) &&
                close_to(unname(as.numeric(sd$pvalues)), raw, 1e-9),
                "mcp Dunnett on the relevelled factor matches the K rows")
  }
  # Manual L b cross-check: the same comparisons from the coefficient vector.
  Lm <- g$linfct
  stop_unless(close_to(drop(Lm %*% coef(fit)), est, 1e-12), "K b equals the glht estimates")

  add(ds, "pairs", opts$text, "", a, b, "", "estimate", est, 0, src_glht)
  add(ds, "pairs", opts$text, "", a, b, "", "std_error", se, 0, src_glht)
  add(ds, "pairs", opts$text, "", a, b, "", "t_stat", tt, 0, src_glht)
  add(ds, "pairs", opts$text, "", a, b, "", "df", rep(df, m), 0, src_glht)
  # multcomp computes 2 (1 - pt(|t|, df)) (one-sided 1 - pt(t, df)): exact
  # to about 2 ulp(1) absolutely, not relatively; its rows carry that as
  # r_error, and the relative-accuracy reference is pt's tail directly.
  RAW_ERR <- 2 * .Machine$double.eps
  raw_exact <- switch(alt, two.sided = 2 * pt(-abs(tt), df), greater = pt(tt, df, lower.tail = FALSE),
                      less = pt(tt, df))
  stop_unless(abs(raw_exact - raw) <= 2 * RAW_ERR, "multcomp raw p = pt tail")
  src_pt <- switch(alt, two.sided = "stats::pt: 2 pt(-|t|, df)", greater = "stats::pt: pt(t, df, lower.tail = FALSE)",
                   less = "stats::pt: pt(t, df)")
  add(ds, "pairs", opts$text, "", a, b, "", "p_value", raw, RAW_ERR, src_glht)
  add(ds, "pairs", opts$text, "", a, b, "", "p_value", raw_exact, 0, src_pt)

  t_crit <- function(level) qt(if (two) 1 - (1 - level) / 2 else level, df)
  padj <- NULL; perr <- 0; crit <- NULL; cerr <- 0
  switch(opts$adjust,
    none = {
      padj <- raw; psrc <- src_glht; perr <- RAW_ERR
      add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", raw_exact, 0, src_pt)
      crit <- t_crit(conf); csrc <- "confint(glht, calpha = univariate_calpha())"
      ci <- confint(g, level = conf, calpha = univariate_calpha())$confint
      stop_unless(close_to(ci[, "lwr"], est - if (alt == "less") Inf else crit * se, 1e-12),
                  "univariate confint equals qt")
    },
    bonferroni = {
      padj <- unname(as.numeric(summary(g, test = adjusted("bonferroni"))$test$pvalues))
      stop_unless(close_to(padj, pmin(1, m * raw), 1e-14), "bonferroni = min(1, m p)")
      psrc <- "multcomp summary(glht, test = adjusted(\"bonferroni\"))"; perr <- m * RAW_ERR
      add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", p.adjust(raw_exact, "bonferroni"), 0,
          "stats::p.adjust(pt tail p, method = \"bonferroni\")")
      crit <- t_crit(1 - alpha / m)
      csrc <- sprintf("confint(glht, calpha = qt(1 - alpha/(%sm), df))", if (two) "2" else "")
    },
    holm = {
      padj <- unname(as.numeric(summary(g, test = adjusted("holm"))$test$pvalues))
      stop_unless(close_to(padj, p.adjust(raw, "holm"), 1e-14), "multcomp holm = p.adjust holm")
      psrc <- "multcomp summary(glht, test = adjusted(\"holm\"))"; perr <- m * RAW_ERR
      add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", p.adjust(raw_exact, "holm"), 0,
          "stats::p.adjust(pt tail p, method = \"holm\")")
      crit <- t_crit(conf); csrc <- "confint(glht, calpha = univariate_calpha()) (per comparison)"
    },
    bh = {
      padj <- p.adjust(raw_exact, method = "BH"); psrc <- "p.adjust(pt tail p, method = \"BH\")"
      crit <- t_crit(conf); csrc <- "confint(glht, calpha = univariate_calpha()) (per comparison)"
    },
    sidak = {
      padj <- -expm1(m * log1p(-raw_exact))
      stop_unless(all(abs(padj - (1 - (1 - raw_exact)^m)) <= 1e-14), "sidak forms agree")
      psrc <- "1 - (1 - p)^m (as -expm1(m log1p(-p)))"
      crit <- t_crit(conf^(1 / m))
      csrc <- sprintf("confint(glht, calpha = qt(%s, df))", if (two) "1 - (1 - conf^(1/m))/2" else "conf^(1/m)")
    },
    tukey = {
      padj <- ptukey_checked(abs(tt) * sqrt(2), L, df); perr <- PTUKEY_ERR
      psrc <- "ptukey(|t| sqrt(2), L, df, lower.tail = FALSE), model-based t (Tukey-Kramer)"
      q <- qtukey_precise(conf, L, df)
      crit <- q / sqrt(2)
      cerr <- (PTUKEY_ERR / dtukey(q, L, df)) / sqrt(2) + 1e-13
      csrc <- "confint(glht, calpha = qtukey(conf, L, df)/sqrt(2)), qtukey polished by uniroot on ptukey"
    },
    scheffe = {
      padj <- pf(tt^2 / (L - 1), L - 1, df, lower.tail = FALSE)
      psrc <- "pf(t^2/(L - 1), L - 1, df, lower.tail = FALSE)"
      crit <- sqrt((L - 1) * qf(conf, L - 1, df))
      csrc <- "confint(glht, calpha = sqrt((L - 1) qf(conf, L - 1, df)))"
    },
    dunnett = {
      set.seed(SEED)
      pv <- summary(g, test = adjusted("single-step", algorithm = GB))$test$pvalues
      # r_error: 3 x pmvt's error estimate plus 1e-7, because that estimate
      # is optimistic in the far tail (at p = 6.5e-8 in 5 dimensions pmvt
      # missed the quadrature value by 1.2e-8 while reporting 4e-9).
      padj <- unname(as.numeric(pv)); perr <- 3 * max(attr(pv, "error"), 0) + 1e-7
      psrc <- "multcomp summary(glht, test = adjusted(\"single-step\")), pmvt GenzBretz(maxpts = 1e6, abseps = 1e-8)"
      corr <- cov2cor(vcov(g))
      dc <- dunnett_crit(conf, corr, df, two)
      crit <- dc$value; cerr <- dc$error
      csrc <- "confint(glht, calpha = c), pmvt(c) = conf by uniroot (GenzBretz maxpts = 2e5)"
      add(ds, "pairs", opts$text, "", "", "", "", "crit_density", dc$density, 0,
          "d/dc of pmvt at the critical value (finite difference); scales the critical value's error")
      if (attr(md, "ncov") == 0L) {
        # Product form: the exact one-dimensional reduction.
        n <- attr(md, "wsum")[lev]
        c0 <- match(opts$vs, lev)
        lam <- sqrt(n[-c0] / (n[-c0] + n[c0]))
        lc <- outer(lam, lam); diag(lc) <- 1
        stop_unless(close_to(unname(corr), unname(lc), 1e-12), "product-form correlation")
        stat <- switch(alt, two.sided = abs(tt), greater = tt, less = -tt)
        qp <- vapply(stat, function(x) dunnett_upper_quad(x, lam, df, two), 0)
        stop_unless(abs(qp - padj) <= perr + QUAD_ERR, "quadrature Dunnett p = multcomp single-step")
        qc <- uniroot(function(x) dunnett_upper_quad(x, lam, df, two) - (1 - conf),
                      crit + c(-0.01, 0.01), extendInt = "yes", tol = 1e-12)$root
        stop_unless(abs(qc - crit) <= cerr + 1e-10, "quadrature Dunnett critical value = pmvt root")
        qci <- ci_glht(g, qc, conf)
        qsrc <- "Dunnett (1955) product-form integral by adaptive quadrature (integrate) in this script"
        add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", qp, QUAD_ERR, qsrc)
        add(ds, "pairs", opts$text, "", a, b, "", "ci_lower", qci$lower, 1e-10 * se, qsrc)
        add(ds, "pairs", opts$text, "", a, b, "", "ci_upper", qci$upper, 1e-10 * se, qsrc)
      }
    })
  ci <- ci_glht(g, crit, conf)
  add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", padj, perr, psrc)
  add(ds, "pairs", opts$text, "", a, b, "", "ci_lower", ci$lower, cerr * se, csrc)
  add(ds, "pairs", opts$text, "", a, b, "", "ci_upper", ci$upper, cerr * se, csrc)

  if (opts$adjust == "tukey") {
    # Exact single-step (multivariate t with the model's correlation).
    key <- paste(ds, conf)
    if (is.null(ss_cache[[key]])) {
      set.seed(SEED)
      gt <- glht(fit, linfct = mcp(g = K))
      pv <- summary(gt, test = adjusted("single-step", algorithm = GB_REF))$test$pvalues
      dc <- dunnett_crit(conf, cov2cor(vcov(gt)), df, TRUE, GB_REF, 1e-7)
      ss_cache[[key]] <- list(p = unname(as.numeric(pv)), err = 3 * max(attr(pv, "error"), 0) + 1e-12,
                              dc = dc, ci = ci_glht(gt, dc$value, conf))
    }
    ss <- ss_cache[[key]]
    ss_p <- ss$p; ss_err <- ss$err; dc <- ss$dc; ss_ci <- ss$ci
    ss_src <- "multcomp summary(glht(lm, mcp(g = K)), test = adjusted(\"single-step\")) and confint at the pmvt root, GenzBretz(maxpts = 2e5, abseps = 1e-6)"
    n_per <- table(md$g)
    exact <- isTRUE(attr(md, "plain_oneway")) && length(unique(as.integer(n_per))) == 1L
    if (exact) {
      stop_unless(abs(ss_p - padj) <= ss_err + PTUKEY_ERR + 1e-7, "balanced: single-step = ptukey")
      add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", ss_p, ss_err, ss_src)
      add(ds, "pairs", opts$text, "", a, b, "", "ci_lower", ss_ci$lower, dc$error * se, ss_src)
      add(ds, "pairs", opts$text, "", a, b, "", "ci_upper", ss_ci$upper, dc$error * se, ss_src)
    } else {
      stop_unless(padj >= ss_p - ss_err - perr, "Tukey-Kramer p >= single-step p")
      stop_unless(crit >= dc$value - dc$error - cerr, "Tukey-Kramer critical value >= single-step")
      add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted_min", ss_p, ss_err, ss_src)
      add(ds, "pairs", opts$text, "", a, b, "", "ci_lower_max", ss_ci$lower, dc$error * se, ss_src)
      add(ds, "pairs", opts$text, "", a, b, "", "ci_upper_min", ss_ci$upper, dc$error * se, ss_src)
    }
    if (isTRUE(attr(md, "plain_oneway"))) {
      # TukeyHSD on the one-way aov: rows "b-a" (b after a), so negate.
      th <- TukeyHSD(aov(y ~ g, data = md), "g", conf.level = conf)$g
      key <- paste0(b, "-", a)
      stop_unless(all(key %in% rownames(th)), "TukeyHSD has every pair")
      th <- th[key, , drop = FALSE]
      stop_unless(close_to(-th[, "diff"], est, 1e-12), "TukeyHSD diff = -estimate")
      q_r <- qtukey(conf, L, df)
      herr <- abs(q_r - qtukey_precise(conf, L, df)) / sqrt(2) * se + cerr * se + 1e-13
      hsrc <- "stats::TukeyHSD(aov(y ~ g), conf.level = conf) (qtukey's deviation in r_error)"
      add(ds, "pairs", opts$text, "", a, b, "", "p_adjusted", unname(th[, "p adj"]), PTUKEY_ERR, hsrc)
      add(ds, "pairs", opts$text, "", a, b, "", "ci_lower", -unname(th[, "upr"]), herr, hsrc)
      add(ds, "pairs", opts$text, "", a, b, "", "ci_upper", -unname(th[, "lwr"]), herr, hsrc)
    }
  }
}

# ---------------------------------------------------------------------------
# Contrasts
# ---------------------------------------------------------------------------
# weights: list of named numeric vectors (names = level labels); at: named
# covariate values overriding the means.
contrast_case <- function(ds, fit, md, lev, covs, wts, weights, conf, opts_text, at = NULL) {
  L <- length(lev)
  xat <- vapply(covs, function(x) sum(wts * md[[x]]) / sum(wts), 0)
  if (!is.null(at)) xat[names(at)] <- at
  cf <- coef(fit)
  # Row of the lm coefficients (treatment coding) for the mean of level i at xat.
  level_row <- function(i) {
    r <- setNames(numeric(length(cf)), names(cf))
    r["(Intercept)"] <- 1
    if (i > 1) r[paste0("g", lev[i])] <- 1
    for (x in covs) r[x] <- xat[[x]]
    r
  }
  M <- t(vapply(seq_len(L), level_row, numeric(length(cf))))
  Kw <- t(vapply(weights, function(w) { v <- numeric(L); v[match(names(w), lev)] <- w; v }, numeric(L)))
  if (length(weights) == 1L) Kw <- matrix(Kw, nrow = 1)
  Lmat <- Kw %*% M
  colnames(Lmat) <- names(cf)
  rownames(Lmat) <- paste0("c", seq_len(nrow(Lmat)))
  g <- glht(fit, linfct = Lmat)
  s0 <- summary(g, test = adjusted("none"))$test
  ci <- confint(g, level = conf, calpha = univariate_calpha())$confint
  est <- unname(s0$coefficients); se <- unname(s0$sigma)
  if (all(abs(rowSums(Kw)) < 1e-12)) {
    Kc <- Kw; colnames(Kc) <- lev; rownames(Kc) <- rownames(Lmat)
    gm <- glht(fit, linfct = mcp(g = Kc))
    sm <- summary(gm, test = adjusted("none"))$test
    stop_unless(close_to(unname(sm$coefficients), est, 1e-10) && close_to(unname(sm$sigma), se, 1e-10),
                "mcp(g = K) matches the manual L b")
  }
  wtext <- paste(vapply(weights, function(w)
    paste(paste0(vapply(names(w), quote_label, ""), "=", fmt17(unname(w))), collapse = ", "), ""),
    collapse = "; ")
  src <- "multcomp::glht(lm, linfct = L) summary(adjusted(\"none\"))"
  srcci <- "multcomp confint(glht, calpha = univariate_calpha())"
  k <- length(est)
  rr <- seq_len(k)
  add(ds, "contrast", opts_text, wtext, "", "", rr, "estimate", est, 0, src)
  add(ds, "contrast", opts_text, wtext, "", "", rr, "std_error", se, 0, src)
  add(ds, "contrast", opts_text, wtext, "", "", rr, "t_stat", unname(s0$tstat), 0, src)
  add(ds, "contrast", opts_text, wtext, "", "", rr, "df", rep(g$df, k), 0, src)
  tc <- unname(s0$tstat)
  pc <- unname(as.numeric(s0$pvalues))
  pc_exact <- 2 * pt(-abs(tc), g$df)
  stop_unless(abs(pc - pc_exact) <= 4 * .Machine$double.eps, "contrast p = pt tail")
  add(ds, "contrast", opts_text, wtext, "", "", rr, "p_value", pc, 2 * .Machine$double.eps, src)
  add(ds, "contrast", opts_text, wtext, "", "", rr, "p_value", pc_exact, 0, "stats::pt: 2 pt(-|t|, df)")
  add(ds, "contrast", opts_text, wtext, "", "", rr, "ci_lower", unname(ci[, "lwr"]), 0, srcci)
  add(ds, "contrast", opts_text, wtext, "", "", rr, "ci_upper", unname(ci[, "upr"]), 0, srcci)
  ft <- summary(g, test = Ftest())$test
  fsrc <- "multcomp summary(glht(lm, linfct = L), test = Ftest())"
  add(ds, "contrast", opts_text, wtext, "", "", "joint", "df", unname(ft$df[1]), 0, fsrc)
  add(ds, "contrast", opts_text, wtext, "", "", "joint", "df_denom", unname(ft$df[2]), 0, fsrc)
  add(ds, "contrast", opts_text, wtext, "", "", "joint", "f_stat", as.numeric(ft$fstat), 0, fsrc)
  add(ds, "contrast", opts_text, wtext, "", "", "joint", "p_value", as.numeric(ft$pvalue), 0, fsrc)
}

# ---------------------------------------------------------------------------
# Datasets (the files of tests/oracle/data and datasets/deliveries.csv)
# ---------------------------------------------------------------------------
specs <- list(
  plantgrowth = list(file = "tests/oracle/data/plantgrowth.csv", y = "weight", g = "group", x = character(0)),
  insectsprays = list(file = "tests/oracle/data/insectsprays.csv", y = "count", g = "spray", x = character(0)),
  chickwts = list(file = "tests/oracle/data/chickwts.csv", y = "weight", g = "feed", x = character(0)),
  iris = list(file = "tests/oracle/data/iris.csv", y = "sepal_length", g = "species", x = "sepal_width"),
  mtcars = list(file = "tests/oracle/data/mtcars.csv", y = "mpg", g = "cyl", x = "wt"),
  mtcars_weighted = list(file = "tests/oracle/data/mtcars_weighted.csv", y = "mpg", g = "cyl", x = "wt", w = "w"),
  deliveries = list(file = "datasets/deliveries.csv", y = "minutes", g = "carrier",
                    x = c("distance_km", "weight_kg")))

run_dataset <- function(name, spec) {
  path <- file.path(repo_root, spec$file)
  raw <- utils::read.csv(path, na.strings = "", check.names = FALSE)
  used <- c(spec$y, spec$g, spec$x, spec$w)
  raw <- raw[stats::complete.cases(raw[, used, drop = FALSE]), , drop = FALSE]
  lev <- as.character(sorted_levels(raw[[spec$g]]))
  L <- length(lev)
  md <- data.frame(y = raw[[spec$y]], g = factor(as.character(raw[[spec$g]]), levels = lev))
  for (x in spec$x) md[[x]] <- raw[[x]]
  wts <- if (is.null(spec$w)) rep(1, nrow(md)) else raw[[spec$w]]
  fml <- as.formula(paste("y ~", paste(c("g", spec$x), collapse = " + ")))
  md$.w <- wts
  fit <- if (is.null(spec$w)) lm(fml, data = md) else lm(fml, data = md, weights = .w)
  attr(md, "plain_oneway") <- length(spec$x) == 0L && is.null(spec$w)
  attr(md, "ncov") <- length(spec$x)
  attr(md, "wsum") <- tapply(wts, md$g, sum)

  header <- c(
    sprintf("# groupfit pairs/contrast golden file, generated %s by tests/oracle/make_pairs_golden.R with %s",
            gen_date, versions),
    sprintf("# data: %s (md5 %s); model: %s ~ %s%s; rows used: %d (complete cases); levels: %s",
            spec$file, unname(tools::md5sum(path)), spec$y, paste(c(spec$g, spec$x), collapse = " + "),
            if (is.null(spec$w)) "" else paste0("; analytic weights: ", spec$w),
            nrow(md), paste(lev, collapse = " ")))

  c1 <- lev[1]; c2 <- lev[L]
  q1 <- quote_label(c1); q2 <- quote_label(c2)
  cases <- list(
    list("none"), list("bonferroni"), list("holm"), list("sidak"), list("bh"), list("tukey"),
    list("scheffe"), list("tukey", text = ""), list("tukey", conf = 0.99),
    list("scheffe", conf = 0.9), list("bonferroni", conf = 0.99), list("sidak", conf = 0.9),
    list("dunnett", vs = c1, text = paste0("vs=", q1)),
    list("dunnett", vs = c1, side = "greater"), list("dunnett", vs = c1, side = "less"),
    list("dunnett", vs = c1, conf = 0.9),
    list("none", vs = c1, side = "greater"), list("bonferroni", vs = c1),
    list("holm", vs = c1, side = "less"), list("sidak", vs = c1, side = "greater"),
    list("bh", vs = c1), list("scheffe", vs = c1), list("none", vs = c1),
    list("dunnett", vs = c2), list("dunnett", vs = c2, side = "less", conf = 0.99),
    list("bonferroni", vs = c2, side = "greater"))
  for (cs in cases) {
    o <- list(adjust = cs[[1]], vs = cs$vs, side = if (is.null(cs$side)) "two_sided" else cs$side,
              conf = if (is.null(cs$conf)) 0.95 else cs$conf)
    txt <- paste0("adjust=", o$adjust)
    if (!is.null(o$vs)) txt <- paste0(txt, "; vs=", quote_label(o$vs))
    if (!is.null(cs$side)) txt <- paste0(txt, "; side=", cs$side)
    if (!is.null(cs$conf)) txt <- paste0(txt, "; conf=", cs$conf)
    o$text <- if (is.null(cs$text)) txt else cs$text
    t1 <- Sys.time()
    pairs_case(name, fit, md, lev, o)
    if (nzchar(Sys.getenv("PAIRS_GOLDEN_TRACE")))
      message(sprintf("    %-40s %.1f s", o$text, as.numeric(difftime(Sys.time(), t1, units = "secs"))))
  }

  nm <- function(v, labs) setNames(v, labs)
  sets <- list(
    list(list(nm(c(1, -0.5, -0.5), lev[1:3]), nm(c(1, -1), lev[c(1, L)])), 0.95, ""),
    list(list(nm(c(1, -0.5, -0.5), lev[1:3]), nm(c(1, -1), lev[c(1, L)])), 0.9, "conf=0.9"),
    list(list(nm(c(1, -1), lev[1:2]), nm(c(1, -1), lev[2:3]), nm(c(1, -1), lev[c(1, 3)])), 0.95, ""),
    list(list(nm(c(-1, 1), lev[1:2])), 0.95, ""),
    list(list(nm(c(0.5, 0.5), lev[1:2]), nm(c(1, -1), lev[2:3])), 0.95, ""),
    list(list(nm(1, lev[L])), 0.95, ""))
  if (length(spec$x) > 0) {
    x1 <- spec$x[1]
    v <- signif(quantile(md[[x1]], 0.8, names = FALSE), 3)
    sets[[length(sets) + 1L]] <- list(list(nm(c(0.5, 0.5), lev[1:2]), nm(c(1, -1), lev[2:3])), 0.95,
                                      paste0("at=", x1, ":", v), setNames(v, x1))
    sets[[length(sets) + 1L]] <- list(list(nm(1, lev[1]), nm(c(1, -1), lev[c(1, L)])), 0.95,
                                      paste0("at=", x1, ":", v), setNames(v, x1))
  }
  for (st in sets)
    contrast_case(name, fit, md, lev, spec$x, wts, st[[1]], st[[2]], st[[3]],
                  if (length(st) >= 4) st[[4]] else NULL)

  write_golden(name, header)
}

ss_cache <- new.env()
only <- commandArgs(trailingOnly = TRUE)
# pmvt's "Completion with error > abseps" is expected (its error estimate is
# written to r_error); other warnings are shown.
quiet_abseps <- function(expr) withCallingHandlers(expr, warning = function(w)
  if (grepl("error > abseps", conditionMessage(w))) invokeRestart("muffleWarning"))
for (nm in names(specs)) if (!length(only) || nm %in% only) {
  t0 <- Sys.time()
  quiet_abseps(run_dataset(nm, specs[[nm]]))
  message(sprintf("  %s: %.0f s", nm, as.numeric(difftime(Sys.time(), t0, units = "secs"))))
}

# ---------------------------------------------------------------------------
# p.adjust on fixed vectors (ties, NA, values near 1, tiny values)
# ---------------------------------------------------------------------------
if (!length(only) || "padjust" %in% only) {
vecs <- list(
  mixed = c(0.01, 0.04, 0.03, 0.005, 0.2, 0.5, 0.04, 0.9),
  ties = c(0.02, 0.02, 0.02, 0.5, 0.5),
  with_na = c(0.03, NA, 0.001, 0.2, NA, 0.04),
  tiny = c(1e-300, 3e-12, 0.7, 2e-5),
  near_one = c(0.99, 0.6, 0.95, 0.8),
  single = c(0.037))
for (v in names(vecs)) {
  p <- vecs[[v]]
  i <- seq_along(p)
  add("padjust", "padjust", v, "", "", "", i, "p", p, 0, "input vector")
  add("padjust", "padjust", v, "", "", "", i, "holm", p.adjust(p, method = "holm"), 0,
      "stats::p.adjust(p, method = \"holm\")")
  add("padjust", "padjust", v, "", "", "", i, "bh", p.adjust(p, method = "BH"), 0,
      "stats::p.adjust(p, method = \"BH\")")
}
write_golden("padjust", c(
  sprintf("# groupfit p.adjust golden file, generated %s by tests/oracle/make_pairs_golden.R with %s",
          gen_date, versions),
  "# data: fixed vectors in the script; NA entries stay NA and are not counted in m"))
}
