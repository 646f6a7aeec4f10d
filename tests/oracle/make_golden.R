# make_golden.R -- writes the R-oracle golden files for groupfit's tests.
#
# Run from the repository root:
#     Rscript tests/oracle/make_golden.R
#
# Uses base R only (stats, utils, tools, datasets). R is used purely as a
# reference calculator here: every contrast coding is OUR definition, written
# out below as an explicit matrix K (row 1 = intercept, rows 2..L = the group
# coefficients, each a linear combination of the cell means mu). R is then
# handed the matching contrast matrix C = solve(K)[, -1], so that R's
# coefficient for column j is K[j, ] %*% mu.
#
# Output (see tests/oracle/README.md for the file format):
#     tests/oracle/data/<dataset>.csv     the data the fits use
#     tests/oracle/golden/<dataset>.csv   long-format expected values
#
# Everything is deterministic except the generation date in the first
# comment line of each golden file (set SOURCE_DATE_EPOCH to pin it).

options(stringsAsFactors = FALSE, warn = 1)

# ---------------------------------------------------------------------------
# Locations
# ---------------------------------------------------------------------------
script_path <- local({
  a <- grep("^--file=", commandArgs(trailingOnly = FALSE), value = TRUE)
  if (length(a) == 1L) normalizePath(sub("^--file=", "", a)) else
    normalizePath("tests/oracle/make_golden.R", mustWork = FALSE)
})
oracle_dir <- dirname(script_path)
repo_root  <- normalizePath(file.path(oracle_dir, "..", ".."))
data_dir   <- file.path(oracle_dir, "data")
golden_dir <- file.path(oracle_dir, "golden")
dir.create(data_dir, showWarnings = FALSE, recursive = TRUE)
dir.create(golden_dir, showWarnings = FALSE, recursive = TRUE)

gen_date <- local({
  e <- Sys.getenv("SOURCE_DATE_EPOCH")
  if (nzchar(e)) format(as.POSIXct(as.numeric(e), origin = "1970-01-01", tz = "UTC"), "%Y-%m-%d")
  else format(Sys.Date(), "%Y-%m-%d")
})

# ---------------------------------------------------------------------------
# Formatting helpers
# ---------------------------------------------------------------------------
# Golden values: always 17 significant digits.
fmt17 <- function(x) {
  out <- sprintf("%.17g", x)
  out[is.na(x)] <- "NA"
  out
}
# Data values: the shortest of 15/16/17 significant digits that reads back
# as exactly the same double (so "4.17" rather than "4.1699999999999999").
fmt_data_num <- function(x) {
  vapply(x, function(v) {
    if (is.na(v)) return("")
    for (d in 15:17) {
      s <- sprintf(paste0("%.", d, "g"), v)
      if (as.numeric(s) == v) return(s)
    }
    s
  }, "")
}
csv_quote <- function(s) {
  s <- as.character(s)
  s[is.na(s)] <- ""
  need <- grepl('[",\r\n]', s) | grepl("^\\s|\\s$", s)
  s[need] <- paste0('"', gsub('"', '""', s[need]), '"')
  s
}
write_data_csv <- function(df, path) {
  cols <- lapply(df, function(col) if (is.numeric(col)) fmt_data_num(col) else csv_quote(col))
  lines <- c(paste(csv_quote(names(df)), collapse = ","),
             do.call(paste, c(cols, sep = ",")))
  con <- file(path, open = "wb")
  writeLines(lines, con, sep = "\n")
  close(con)
}

# ---------------------------------------------------------------------------
# Level ordering: numeric ascending for numbers, C-locale byte order for text
# ---------------------------------------------------------------------------
sorted_levels <- function(x) {
  u <- unique(x[!is.na(x)])
  if (is.numeric(u)) sort(u) else sort(as.character(u), method = "radix")
}

# ---------------------------------------------------------------------------
# Coding matrices K (L x L). Row 1 = intercept, rows 2..L = coefficients g:1..g:(L-1)
# ---------------------------------------------------------------------------
unit <- function(L, j) { v <- numeric(L); v[j] <- 1; v }

K_dummy <- function(L, b) {
  rows <- lapply(setdiff(seq_len(L), b), function(j) unit(L, j) - unit(L, b))
  rbind(unit(L, b), do.call(rbind, rows))
}
K_effect <- function(L, b) {
  m <- rep(1 / L, L)
  rows <- lapply(setdiff(seq_len(L), b), function(j) unit(L, j) - m)
  rbind(m, do.call(rbind, rows))
}
K_weighted_effect <- function(n, b) {
  L <- length(n); m <- n / sum(n)
  rows <- lapply(setdiff(seq_len(L), b), function(j) unit(L, j) - m)
  rbind(m, do.call(rbind, rows))
}
K_helmert <- function(L) {
  rows <- lapply(seq_len(L - 1L), function(j) {
    v <- unit(L, j); v[(j + 1L):L] <- -1 / (L - j); v })
  rbind(rep(1 / L, L), do.call(rbind, rows))
}
K_reverse_helmert <- function(L) {
  rows <- lapply(2:L, function(j) {
    v <- unit(L, j); v[1:(j - 1L)] <- -1 / (j - 1L); v })
  rbind(rep(1 / L, L), do.call(rbind, rows))
}
K_successive <- function(L) {
  rows <- lapply(2:L, function(j) unit(L, j) - unit(L, j - 1L))
  rbind(rep(1 / L, L), do.call(rbind, rows))
}
# Independent construction of the orthonormal polynomial contrasts:
# Gram-Schmidt of s^0, s^1, ..., s^(L-1) (centred/scaled scores for accuracy),
# normalised to unit length. Each residual is s^d minus a lower-degree
# polynomial, so its leading coefficient is positive by construction.
poly_gram_schmidt <- function(s) {
  L <- length(s)
  t <- (s - mean(s)) / max(abs(s - mean(s)))
  Q <- matrix(1 / sqrt(L), L, 1)
  for (d in seq_len(L - 1L)) {
    v <- t^d
    for (pass in 1:2) v <- v - Q %*% crossprod(Q, v)   # re-orthogonalise once
    Q <- cbind(Q, v / sqrt(sum(v^2)))
  }
  Q[, -1, drop = FALSE]
}
K_polynomial <- function(L, scores) {
  P <- contr.poly(L, scores = scores)
  P_ref <- poly_gram_schmidt(scores)
  if (max(abs(unname(P) - P_ref)) > 1e-12)
    stop("polynomial contrasts differ from contr.poly for scores ", paste(scores, collapse = " "))
  rbind(rep(1 / L, L), t(unname(P)))
}
# Custom rows (all zero-sum, deliberately neither orthogonal nor unit length
# throughout). Written to the golden file as quantity k:<m>.
custom_rows <- function(L) {
  R <- switch(as.character(L),
    "2" = rbind(c(2, -2)),
    "3" = rbind(c(1, -1, 0),
                c(1, 1, -2) / 2),
    "5" = rbind(c(1, -1, 0, 0, 0),
                c(0, 0, 1, -1, 0),
                c(1, 1, -1, -1, 0) / 2,
                c(1, 1, 1, 1, -4) / 4),
    "6" = rbind(c(1, -1, 0, 0, 0, 0),
                c(0, 0, 1, -1, 0, 0),
                c(0, 0, 0, 0, 1, -1),
                c(1, 1, -1, -1, 0, 0) / 2,
                c(1, 1, 1, 1, -2, -2) / 4),
    # fallback: mean of the first k levels minus level k+1
    do.call(rbind, lapply(seq_len(L - 1L), function(k) {
      v <- numeric(L); v[1:k] <- 1 / k; v[k + 1L] <- -1; v })))
  R
}
K_custom <- function(L) rbind(rep(1 / L, L), custom_rows(L))

# ---------------------------------------------------------------------------
# Datasets
# ---------------------------------------------------------------------------
# Each spec: name, data frame written to data/, response, group, covariates,
# weights column (or NA). Column names are SQL-friendly snake_case.
specs <- list()

d <- datasets::PlantGrowth
specs$plantgrowth <- list(
  data = data.frame(weight = d$weight, group = as.character(d$group)),
  y = "weight", g = "group", x = character(0), w = NA)

d <- datasets::chickwts
specs$chickwts <- list(
  data = data.frame(weight = d$weight, feed = as.character(d$feed)),
  y = "weight", g = "feed", x = character(0), w = NA)

d <- datasets::InsectSprays
specs$insectsprays <- list(
  data = data.frame(count = d$count, spray = as.character(d$spray)),
  y = "count", g = "spray", x = character(0), w = NA)

d <- datasets::ToothGrowth
specs$toothgrowth <- list(
  data = data.frame(len = d$len, supp = as.character(d$supp), dose = d$dose),
  y = "len", g = "dose", x = character(0), w = NA)

d <- datasets::iris
specs$iris <- list(
  data = data.frame(sepal_length = d$Sepal.Length, sepal_width = d$Sepal.Width,
                    petal_length = d$Petal.Length, petal_width = d$Petal.Width,
                    species = as.character(d$Species)),
  y = "sepal_length", g = "species", x = c("sepal_width", "petal_width"), w = NA)

d <- datasets::mtcars
mt <- data.frame(model = rownames(d), d, row.names = NULL)
specs$mtcars <- list(
  data = mt, y = "mpg", g = "cyl", x = c("wt", "hp"), w = NA)

specs$mtcars_weighted <- list(
  data = data.frame(model = mt$model, mpg = mt$mpg, cyl = mt$cyl, wt = mt$wt,
                    w = 1 + (seq_len(nrow(mt)) %% 3)),
  y = "mpg", g = "cyl", x = "wt", w = "w")

deliveries_path <- file.path(repo_root, "datasets", "deliveries.csv")
if (file.exists(deliveries_path)) {
  raw <- utils::read.csv(deliveries_path, na.strings = "", check.names = FALSE,
                         colClasses = c(carrier = "character", distance_km = "numeric",
                                        weight_kg = "numeric", minutes = "numeric"))
  specs$deliveries <- list(
    data = raw, y = "minutes", g = "carrier", x = c("distance_km", "weight_kg"), w = NA,
    external = "datasets/deliveries.csv",
    md5 = unname(tools::md5sum(deliveries_path)))
} else {
  message("NOTE: ", deliveries_path, " not found; skipping the deliveries golden file")
}

# ---------------------------------------------------------------------------
# Fitting and golden output
# ---------------------------------------------------------------------------
check_close <- function(a, b, what, tol = 1e-9) {
  a <- unname(as.numeric(a)); b <- unname(as.numeric(b))
  err <- max(abs(a - b) / pmax(1, abs(b)))
  if (!is.finite(err) || err > tol) stop(sprintf("self-check failed: %s (rel err %g)", what, err))
  invisible(TRUE)
}

run_dataset <- function(name, spec) {
  df <- spec$data
  if (is.null(spec$external)) write_data_csv(df, file.path(data_dir, paste0(name, ".csv")))

  used_cols <- c(spec$y, spec$g, spec$x, if (!is.na(spec$w)) spec$w)
  df <- df[stats::complete.cases(df[, used_cols, drop = FALSE]), , drop = FALSE]
  lev <- sorted_levels(df[[spec$g]])
  L <- length(lev)
  if (L < 2L) stop(name, ": fewer than 2 levels")
  lev_lab <- as.character(lev)
  md <- data.frame(y = df[[spec$y]], g = factor(df[[spec$g]], levels = lev, labels = lev_lab))
  for (x in spec$x) md[[x]] <- df[[x]]
  wts <- if (is.na(spec$w)) rep(1, nrow(md)) else df[[spec$w]]
  md$.w <- wts
  weighted <- !is.na(spec$w)
  rhs <- paste(c("g", spec$x), collapse = " + ")
  fml <- stats::as.formula(paste("y ~", rhs))
  n_j <- as.numeric(table(md$g))
  wsum_j <- as.numeric(tapply(md$.w, md$g, sum))
  nw_j <- if (weighted) wsum_j else n_j

  rows <- list()
  add <- function(coding, base, spacing, quantity, term, value) {
    rows[[length(rows) + 1L]] <<- data.frame(
      dataset = name, coding = coding, base = base, spacing = spacing,
      quantity = quantity, term = term,
      value = if (is.numeric(value)) fmt17(value) else as.character(value))
  }

  fit_with <- function(C) {
    if (weighted) stats::lm(fml, data = md, weights = .w, contrasts = list(g = C))
    else stats::lm(fml, data = md, contrasts = list(g = C))
  }

  # Cell-means fit: mu_j = level mean at the covariate origin.
  cm_fml <- stats::as.formula(paste("y ~ 0 +", rhs))
  cm_fit <- if (weighted) stats::lm(cm_fml, data = md, weights = .w) else stats::lm(cm_fml, data = md)
  mu <- unname(stats::coef(cm_fit)[paste0("g", lev_lab)])
  V_mu <- stats::vcov(cm_fit)[paste0("g", lev_lab), paste0("g", lev_lab)]

  codings <- list(
    list(coding = "dummy", base = 1L, spacing = "", K = K_dummy(L, 1L)),
    list(coding = "dummy", base = 2L, spacing = "", K = K_dummy(L, 2L)),
    list(coding = "effect", base = L, spacing = "", K = K_effect(L, L)),
    list(coding = "effect", base = 1L, spacing = "", K = K_effect(L, 1L)),
    list(coding = "weighted_effect", base = L, spacing = "", K = K_weighted_effect(nw_j, L)),
    list(coding = "weighted_effect", base = 1L, spacing = "", K = K_weighted_effect(nw_j, 1L)),
    list(coding = "helmert", base = NA, spacing = "", K = K_helmert(L)),
    list(coding = "reverse_helmert", base = NA, spacing = "", K = K_reverse_helmert(L)),
    list(coding = "successive", base = NA, spacing = "", K = K_successive(L)),
    list(coding = "polynomial", base = NA, spacing = "equal", K = K_polynomial(L, seq_len(L))))
  if (is.numeric(lev))
    codings[[length(codings) + 1L]] <-
      list(coding = "polynomial", base = NA, spacing = "values", K = K_polynomial(L, lev))
  codings[[length(codings) + 1L]] <- list(coding = "custom", base = NA, spacing = "", K = K_custom(L))

  gterms <- paste0("g:", seq_len(L - 1L))
  ref_fit <- NULL
  for (cd in codings) {
    K <- unname(cd$K)
    if (abs(det(K)) < 1e-10) stop(name, "/", cd$coding, ": K is singular")
    Z <- solve(K)
    if (max(abs(Z[, 1] - 1)) > 1e-10) stop(name, "/", cd$coding, ": first column of solve(K) is not all ones")
    C <- Z[, -1, drop = FALSE]
    dimnames(C) <- list(lev_lab, as.character(seq_len(L - 1L)))
    fit <- fit_with(C)
    sm <- summary(fit)$coefficients
    rn <- c("(Intercept)", paste0("g", seq_len(L - 1L)), spec$x)
    if (!identical(rownames(sm), rn)) stop(name, "/", cd$coding, ": unexpected coefficient names")
    terms <- c("intercept", gterms, spec$x)
    base_s <- if (is.na(cd$base)) "" else as.character(cd$base)

    # Self-checks: R's coefficients are K %*% mu, their SEs sqrt(diag(K V K')).
    check_close(sm[1:L, 1], K %*% mu, paste(name, cd$coding, "estimates = K mu"))
    check_close(sm[1:L, 2], sqrt(diag(K %*% V_mu %*% t(K))), paste(name, cd$coding, "SE = sqrt(diag(K V K'))"))
    if (length(spec$x)) check_close(sm[spec$x, 1], stats::coef(cm_fit)[spec$x], paste(name, cd$coding, "covariate slopes"))
    check_close(sum(stats::weighted.residuals(fit)^2), sum(stats::weighted.residuals(cm_fit)^2),
                paste(name, cd$coding, "RSS"))

    for (i in seq_along(terms)) {
      add(cd$coding, base_s, cd$spacing, "estimate",  terms[i], sm[i, 1])
      add(cd$coding, base_s, cd$spacing, "std_error", terms[i], sm[i, 2])
      add(cd$coding, base_s, cd$spacing, "t_stat",    terms[i], sm[i, 3])
      add(cd$coding, base_s, cd$spacing, "p_value",   terms[i], sm[i, 4])
    }
    kterms <- c("intercept", gterms)
    for (r in seq_len(L)) for (m in seq_len(L))
      add(cd$coding, base_s, cd$spacing, paste0("k:", m), kterms[r], K[r, m])
    if (is.null(ref_fit)) ref_fit <- fit
  }

  # ---- coding-independent quantities -------------------------------------
  fit <- ref_fit
  s <- summary(fit)
  add("", "", "", "n_obs", "", nrow(md))
  add("", "", "", "n_levels", "", L)
  lm_j <- as.numeric(tapply(seq_len(nrow(md)), md$g, function(ix) stats::weighted.mean(md$y[ix], md$.w[ix])))
  for (m in seq_len(L)) {
    t <- paste0("level:", m)
    add("", "", "", "level_label", t, lev_lab[m])
    add("", "", "", "level_n", t, n_j[m])
    if (weighted) add("", "", "", "level_weight_sum", t, wsum_j[m])
    add("", "", "", "level_mean", t, lm_j[m])
  }

  dr <- stats::drop1(fit, test = "F")
  for (tm in c("g", spec$x)) {
    add("", "", "", "drop1_df",  tm, dr[tm, "Df"])
    add("", "", "", "drop1_ss",  tm, dr[tm, "Sum of Sq"])
    add("", "", "", "drop1_rss", tm, dr[tm, "RSS"])
    add("", "", "", "drop1_F",   tm, dr[tm, "F value"])
    add("", "", "", "drop1_p",   tm, dr[tm, "Pr(>F)"])
  }

  rss <- sum(stats::weighted.residuals(fit)^2)
  fs <- s$fstatistic
  ll <- stats::logLik(fit)
  add("", "", "", "residual_df", "", fit$df.residual)
  add("", "", "", "rss", "", rss)
  add("", "", "", "r_squared", "", s$r.squared)
  add("", "", "", "adj_r_squared", "", s$adj.r.squared)
  add("", "", "", "sigma", "", s$sigma)
  add("", "", "", "f_stat", "", fs[["value"]])
  add("", "", "", "f_num_df", "", fs[["numdf"]])
  add("", "", "", "f_den_df", "", fs[["dendf"]])
  add("", "", "", "f_p", "", stats::pf(fs[["value"]], fs[["numdf"]], fs[["dendf"]], lower.tail = FALSE))
  add("", "", "", "loglik", "", as.numeric(ll))
  add("", "", "", "loglik_df", "", attr(ll, "df"))
  add("", "", "", "aic", "", stats::AIC(fit))
  add("", "", "", "bic", "", stats::BIC(fit))

  # Adjusted means at the covariate means (weighted means in the weighted case).
  nd <- data.frame(g = factor(lev_lab, levels = lev_lab))
  for (x in spec$x) {
    xm <- stats::weighted.mean(md[[x]], md$.w)
    nd[[x]] <- xm
    add("", "", "", "covariate_mean", x, xm)
  }
  pr <- stats::predict(fit, newdata = nd, se.fit = TRUE)
  for (m in seq_len(L)) {
    add("", "", "", "adjusted_mean", paste0("level:", m), pr$fit[[m]])
    add("", "", "", "adjusted_mean_se", paste0("level:", m), pr$se.fit[[m]])
  }

  if (length(spec$x) == 0L && !weighted) {
    wt <- stats::oneway.test(y ~ g, data = md, var.equal = FALSE)
    add("", "", "", "welch_F", "", wt$statistic[[1]])
    add("", "", "", "welch_num_df", "", wt$parameter[[1]])
    add("", "", "", "welch_den_df", "", wt$parameter[[2]])
    add("", "", "", "welch_p", "", wt$p.value)
  }

  # Sanity check: effect coding on PlantGrowth = level mean - mean of level means.
  if (name == "plantgrowth") {
    fe <- fit_with(solve(K_effect(L, L))[, -1, drop = FALSE])
    means <- as.numeric(tapply(md$y, md$g, mean))
    check_close(stats::coef(fe)[-1], means[-L] - mean(means), "plantgrowth effect = mean - mean of means", 1e-12)
    check_close(stats::coef(fe)[1], mean(means), "plantgrowth effect intercept = mean of means", 1e-12)
  }

  out <- do.call(rbind, rows)
  header <- c(
    sprintf("# groupfit R oracle golden file, generated %s by tests/oracle/make_golden.R with %s",
            gen_date, R.version.string),
    sprintf("# data: %s%s; model: %s ~ %s%s%s; rows used: %d (complete cases); levels: %s",
            if (is.null(spec$external)) paste0("tests/oracle/data/", name, ".csv") else spec$external,
            if (is.null(spec$md5)) "" else paste0(" (md5 ", spec$md5, ")"),
            spec$y, spec$g, if (length(spec$x)) paste0(" + ", paste(spec$x, collapse = " + ")) else "",
            if (weighted) paste0("; analytic weights: ", spec$w) else "",
            nrow(md), paste(lev_lab, collapse = " ")))
  body <- c("dataset,coding,base,spacing,quantity,term,value",
            do.call(paste, c(lapply(out, csv_quote), sep = ",")))
  con <- file(file.path(golden_dir, paste0(name, ".csv")), open = "wb")
  writeLines(c(header, body), con, sep = "\n")
  close(con)
  message(sprintf("%-16s n=%4d L=%d codings=%d rows=%d", name, nrow(md), L, length(codings), nrow(out)))
}

for (nm in names(specs)) run_dataset(nm, specs[[nm]])
message("done")
