# make_cross_golden.R -- expected values for crossed factors (tests/core/test_cross.cpp).
#
# Run from the repository root:
#     Rscript tests/oracle/make_cross_golden.R
#
# R (4.2, Debian package r-base) with the Debian packages r-cran-car (Type II and
# Type III tests) and r-cran-emmeans (marginal means and their comparisons) is
# used purely as a reference calculator. The designs are either data sets that
# R ships (warpbreaks, ToothGrowth, mtcars) or invented here with a fixed seed.
#
# Writes:
#   tests/oracle/data/cross_<case>.csv     the rows (y, factors a, b[, c], [x])
#   tests/oracle/golden/cross_<case>.csv   case,what,label,stat,value
# what: test1/test2/test3 (label = term, R's a:b written as a × b, stats df,
#       sum_sq, f_stat, p_value), homogeneity (the slopes-by-first-factor test),
#       cell / equal / proportional (label = level or a/b cell; stats estimate,
#       std_error), pair_equal (label = level_a|level_b; Tukey over the
#       equal-weight marginal means of the first factor: estimate, std_error,
#       p_adjusted), resid (df, sum_sq), coef_dummy (label = R's coefficient
#       name; only for full-rank designs).
# The empty-cell case has no car Type III (car refuses aliased coefficients);
# its Type III rows come from drop1() on sum-to-zero contrasts, which compares
# the model with and without each term's columns (degrees of freedom = rank
# difference), the same definition groupfit uses.

options(stringsAsFactors = FALSE, warn = 1, digits = 17)
suppressPackageStartupMessages({ library(car); library(emmeans) })
emm_options(lmer.df = "asymptotic")

script_path <- local({
  a <- grep("^--file=", commandArgs(trailingOnly = FALSE), value = TRUE)
  if (length(a) == 1L) normalizePath(sub("^--file=", "", a)) else
    normalizePath("tests/oracle/make_cross_golden.R", mustWork = FALSE)
})
oracle_dir <- dirname(script_path)

fmt <- function(v) trimws(formatC(v, digits = 17, format = "g"))

write_case <- function(name, d, form_terms, factors, covariate = NULL, slopes_sep = FALSE,
                       empty = FALSE, types = 1:3) {
  raw <- d
  for (f in factors) d[[f]] <- factor(d[[f]], levels = sort(unique(d[[f]])))
  # When slopes vary by group, a factor's Type III test depends on where the
  # covariate is centred; groupfit tests at the covariate's mean (its default
  # at=), so R is given the centred covariate. Coefficients are then at the
  # mean rather than at 0 and are not compared.
  if (slopes_sep) d[[covariate]] <- d[[covariate]] - mean(d[[covariate]])
  out <- list()
  add <- function(what, label, stat, value)
    out[[length(out) + 1L]] <<- data.frame(case = name, what = what, label = label, stat = stat,
                                           value = fmt(value))
  rhs <- paste(form_terms, collapse = " + ")
  fo <- as.formula(paste("y ~", rhs))
  ctr <- setNames(rep(list("contr.sum"), length(factors)), factors)
  fit <- lm(terms(fo, keep.order = TRUE), data = d, contrasts = ctr)
  lab <- function(t) gsub(":", " \u00d7 ", t, fixed = TRUE)
  add("resid", "residual", "df", fit$df.residual)
  add("resid", "residual", "sum_sq", deviance(fit))
  if (1 %in% types) {
    a1 <- anova(fit)
    for (t in setdiff(rownames(a1), "Residuals")) {
      add("test1", lab(t), "df", a1[t, "Df"]); add("test1", lab(t), "sum_sq", a1[t, "Sum Sq"])
      add("test1", lab(t), "f_stat", a1[t, "F value"]); add("test1", lab(t), "p_value", a1[t, "Pr(>F)"])
    }
  }
  if (!empty) {
    for (ty in intersect(types, 2:3)) {
      a <- car::Anova(fit, type = ty)
      for (t in setdiff(rownames(a), c("Residuals", "(Intercept)"))) {
        w <- paste0("test", ty)
        add(w, lab(t), "df", a[t, "Df"]); add(w, lab(t), "sum_sq", a[t, "Sum Sq"])
        add(w, lab(t), "f_stat", a[t, "F value"]); add(w, lab(t), "p_value", a[t, "Pr(>F)"])
      }
    }
  } else {
    dr <- drop1(fit, scope = ~ ., test = "F")
    for (t in setdiff(rownames(dr), "<none>")) {
      add("test3", lab(t), "df", dr[t, "Df"]); add("test3", lab(t), "sum_sq", dr[t, "Sum of Sq"])
      add("test3", lab(t), "f_stat", dr[t, "F value"]); add("test3", lab(t), "p_value", dr[t, "Pr(>F)"])
    }
  }
  if (!is.null(covariate) && !slopes_sep) {
    # Homogeneity of slopes: the model plus first-factor-by-covariate terms.
    bigger <- update(fit, as.formula(paste(". ~ . +", factors[1], ":", covariate)))
    h <- anova(fit, bigger)
    add("homogeneity", "h", "df", h$Df[2]); add("homogeneity", "h", "sum_sq", h$`Sum of Sq`[2])
    add("homogeneity", "h", "f_stat", h$F[2]); add("homogeneity", "h", "p_value", h$`Pr(>F)`[2])
  }
  if (!empty) {
    # Cell means and marginal means of every factor, covariates at their means.
    cells <- summary(emmeans(fit, as.formula(paste("~", paste(factors, collapse = "*")))))
    for (i in seq_len(nrow(cells))) {
      l <- paste(sapply(factors, function(f) as.character(cells[[f]][i])), collapse = "/")
      add("cell", l, "estimate", cells$emmean[i]); add("cell", l, "std_error", cells$SE[i])
    }
    for (f in factors) {
      for (w in c("equal", "cells")) {
        m <- summary(emmeans(fit, as.formula(paste("~", f)), weights = w))
        kind <- if (w == "equal") "equal" else "proportional"
        for (i in seq_len(nrow(m))) {
          l <- paste0(f, "=", as.character(m[[f]][i]))
          add(kind, l, "estimate", m$emmean[i]); add(kind, l, "std_error", m$SE[i])
        }
      }
    }
    pr <- summary(pairs(emmeans(fit, as.formula(paste("~", factors[1])), weights = "equal"),
                        adjust = "tukey"))
    cmb <- combn(levels(d[[factors[1]]]), 2)  # emmeans' order: (1,2), (1,3), ..., (2,3), ...
    stopifnot(ncol(cmb) == nrow(pr))
    for (i in seq_len(nrow(pr))) {
      l <- paste0(cmb[1, i], "|", cmb[2, i])
      add("pair_equal", l, "estimate", pr$estimate[i]); add("pair_equal", l, "std_error", pr$SE[i])
      add("pair_equal", l, "p_adjusted", pr$p.value[i])
    }
    # Dummy (treatment) coefficients of the full-rank fit: intercept = first cell.
    if (!slopes_sep) {
      fd <- lm(terms(fo, keep.order = TRUE), data = d)
      cf <- summary(fd)$coefficients
      for (r in rownames(cf)) {
        add("coef_dummy", r, "estimate", cf[r, 1]); add("coef_dummy", r, "std_error", cf[r, 2])
      }
    }
  }
  cols <- c("y", factors, covariate)
  write.csv(raw[, cols], file.path(oracle_dir, "data", paste0("cross_", name, ".csv")),
            row.names = FALSE, quote = FALSE)
  g <- do.call(rbind, out)
  con <- file(file.path(oracle_dir, "golden", paste0("cross_", name, ".csv")), "w")
  writeLines(paste0("# R ", R.version$major, ".", R.version$minor, " lm, car ",
                    packageVersion("car"), ", emmeans ", packageVersion("emmeans"),
                    "; tests/oracle/make_cross_golden.R"), con)
  write.csv(g, con, row.names = FALSE, quote = FALSE)
  close(con)
}

# R's data sets (two factors).
wb <- data.frame(y = warpbreaks$breaks, a = as.character(warpbreaks$wool),
                 b = as.character(warpbreaks$tension))
write_case("warpbreaks", wb, c("a", "b", "a:b"), c("a", "b"))
tg <- data.frame(y = ToothGrowth$len, a = as.character(ToothGrowth$supp), b = ToothGrowth$dose)
write_case("toothgrowth", tg, c("a", "b", "a:b"), c("a", "b"))
mt <- data.frame(y = mtcars$mpg, a = mtcars$cyl, b = mtcars$am, x = mtcars$wt)
write_case("mtcars_cyl_am_wt", mt, c("a", "b", "a:b", "x"), c("a", "b"), covariate = "x")
# cyl x gear has no 8-cylinder car with 4 gears: an empty cell.
me <- data.frame(y = mtcars$mpg, a = mtcars$cyl, b = mtcars$gear)
write_case("mtcars_cyl_gear_empty", me, c("a", "b", "a:b"), c("a", "b"), empty = TRUE)

# Invented unbalanced designs (fixed seed).
set.seed(20261202)
n <- 90
inv <- data.frame(a = sample(c("north", "south", "west"), n, TRUE, prob = c(0.5, 0.3, 0.2)),
                  b = sample(c("basic", "plus"), n, TRUE, prob = c(0.6, 0.4)),
                  c = sample(c(1L, 2L), n, TRUE, prob = c(0.45, 0.55)),
                  x = round(runif(n, 5, 40), 1))
eff_a <- c(north = 0, south = 3, west = -2); eff_b <- c(basic = 0, plus = 4)
inv$y <- round(20 + eff_a[inv$a] + eff_b[inv$b] + 1.5 * inv$c + 0.3 * inv$x +
                 ifelse(inv$a == "south" & inv$b == "plus", 2.5, 0) +
                 0.04 * inv$x * (inv$a == "west") + rnorm(n, 0, 2.5), 2)
write_case("invented3", inv[, c("y", "a", "b", "c")],
           c("a", "b", "c", "a:b", "a:c", "b:c", "a:b:c"), c("a", "b", "c"))
write_case("invented3_x", inv, c("a", "b", "c", "a:b", "a:c", "b:c", "a:b:c", "x"),
           c("a", "b", "c"), covariate = "x")
write_case("invented3_main_x", inv, c("a", "b", "c", "x"), c("a", "b", "c"), covariate = "x")
write_case("invented3_two_way", inv[, c("y", "a", "b", "c")],
           c("a", "b", "c", "a:b", "a:c", "b:c"), c("a", "b", "c"))
inv2 <- inv[, c("y", "a", "b", "x")]
write_case("invented2_separate", inv2, c("a", "b", "a:b", "x", "a:x"), c("a", "b"),
           covariate = "x", slopes_sep = TRUE)
# An empty cell in an invented two-factor design.
emp <- inv2[!(inv2$a == "west" & inv2$b == "plus"), c("y", "a", "b")]
write_case("invented2_empty", emp, c("a", "b", "a:b"), c("a", "b"), empty = TRUE)
# One factor with a covariate (mtcars: mpg by cylinders, weight): the
# homogeneity-of-slopes test of the common-slopes model, and the separate-
# slopes model (covariate centred, as above).
one <- data.frame(y = mtcars$mpg, a = mtcars$cyl, x = mtcars$wt)
local({
  d <- one; d$a <- factor(d$a); d$x <- d$x - mean(d$x)
  out <- list()
  add <- function(what, label, stat, value)
    out[[length(out) + 1L]] <<- data.frame(case = "oneway", what = what, label = label, stat = stat,
                                           value = fmt(value))
  common <- lm(y ~ a + x, data = d, contrasts = list(a = "contr.sum"))
  sep <- lm(y ~ a + x + a:x, data = d, contrasts = list(a = "contr.sum"))
  h <- anova(common, sep)
  add("homogeneity", "h", "df", h$Df[2]); add("homogeneity", "h", "sum_sq", h$`Sum of Sq`[2])
  add("homogeneity", "h", "f_stat", h$F[2]); add("homogeneity", "h", "p_value", h$`Pr(>F)`[2])
  a3 <- car::Anova(sep, type = 3)
  for (t in setdiff(rownames(a3), c("Residuals", "(Intercept)"))) {
    l <- gsub(":", " \u00d7 ", t, fixed = TRUE)
    add("test3", l, "df", a3[t, "Df"]); add("test3", l, "sum_sq", a3[t, "Sum Sq"])
    add("test3", l, "f_stat", a3[t, "F value"]); add("test3", l, "p_value", a3[t, "Pr(>F)"])
  }
  write.csv(one, file.path(oracle_dir, "data", "cross_oneway.csv"), row.names = FALSE, quote = FALSE)
  con <- file(file.path(oracle_dir, "golden", "cross_oneway.csv"), "w")
  writeLines(paste0("# R ", R.version$major, ".", R.version$minor, " lm, car ",
                    packageVersion("car"), "; tests/oracle/make_cross_golden.R"), con)
  write.csv(do.call(rbind, out), con, row.names = FALSE, quote = FALSE)
  close(con)
})
cat("wrote cross_* golden files\n")
