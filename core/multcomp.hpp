// groupfit core: distributions for multiple comparisons of means.
//
// 1. The studentized range Q = R / S for k means and df degrees of freedom
//    (Tukey's HSD, Games-Howell with Welch df), with R the range of k
//    independent standard normals and S = sqrt(chi^2_df / df) independent of R:
//
//        P(Q <= q) = int_0^inf f_S(s) W(q s) ds,
//        W(w)      = k int phi(x) [Phi(x) - Phi(x - w)]^(k-1) dx   (range CDF),
//
//    the defining integral of Hartley (1944) and Copenhaver & Holland (1988);
//    df = +inf is the normal-range limit P(R <= q).
//
//    How it is computed (our own arrangement of that integral):
//    * The range tail is handled through G(w) = e^{w^2/4} (1 - W(w)), which
//      varies slowly (G(0) = 1, G(w) -> k(k-1)/(w sqrt(pi)) as w -> inf). Its
//      integrand over x is written in a form centred on x = w/2 with no
//      cancellation, k Phi(x)^(k-2) (P/r) e^{-(x-w/2)^2} Mills(w-x) / (2 pi),
//      and integrated by adaptive Gauss-Kronrod (31 points) over the interval
//      where a log-concave envelope of the integrand is within e^-50 of its
//      maximum. log G is tabulated once per k as a piecewise Chebyshev
//      interpolant (degree 20, panels bisected until the trailing coefficients
//      are below 5e-14) in y = w / (w + s0), y in [0, 1): the table covers every
//      w up to infinity. The tables of the last few k are kept per thread.
//    * The chi variable is tilted so that the upper tail needs no cancellation:
//      with U = sqrt(chi^2_df / 2), c = 1 + q^2/(2 df) and
//      kappa = q sqrt(2 / (df + q^2/2)),
//          P(Q > q) = c^(-df/2) E[ G(kappa U) ],
//      an identity (substitute t = T/c in the chi^2 integral). The factor
//      c^(-df/2) carries the polynomial tail of Q; the expectation is an
//      integral of a slowly varying function against the density of U. Its
//      integrand's mode is found by safeguarded Newton steps (derivatives of
//      log G from the table), the interval is where the integrand is within
//      e^-40 of that maximum, and adaptive Gauss-Kronrod (31 points, started
//      on the bulk +- 3 sd and the two tails) integrates there. For
//      non-integer df whose interval reaches 0, the piece [0, u_s] is
//      integrated in t with u = u_s t^m, m >= 5/df, so that the density's
//      power u^(df-1) becomes smooth enough.
//    * The CDF is 1 - P(Q > q) (absolute accuracy; the lower tail has no
//      separate relative accuracy). Quantiles solve log P(Q > q) = log(1 - p)
//      (p >= 1/2) or P(Q <= q) = p with the TOMS 748 bracketing solver.
//    Accuracy (tests/core/test_multcomp.cpp, against mpmath at 30 digits on
//    k = 2..200, df = 1..1000 and inf, q = 0.5..1000): largest errors 1.3e-14
//    absolute and 3e-14 relative on upper tails down to 1e-45, 1.3e-14
//    absolute on the CDF, 3e-15 relative on quantiles (tested at 1e-9 and
//    1e-8). Against scipy for k up to 10000: about 1e-14. Cost: the table
//    for a new k takes 10-60 ms; then about 6-10 us per probability and
//    0.1-0.3 ms per quantile.
//
// 2. Dunnett's many-to-one comparisons: T_i = Z_i / S, i = 1..m, with Z
//    multivariate normal with unit variances and correlation matrix R, and S
//    as above (df finite or +inf). Two-sided: P(max_i |T_i| <= c); one-sided:
//    P(max_i T_i <= c) (the other direction is the same by symmetry).
//    * Product form R_ij = lambda_i lambda_j (i != j), |lambda_i| < 1: exact
//      reduction of Dunnett (1955): Z_i = lambda_i Y + sqrt(1 - lambda_i^2) X_i
//      with Y, X_i independent standard normals, so the probability is a
//      one-dimensional integral over Y of a product of normal probabilities,
//      then one over S for finite df. The upper tail is computed directly,
//      tilted by e^{c^2 s^2/2} the same way as the studentized range (factor
//      (1 + c^2/df)^(-df/2)); inner integral over Y by adaptive Gauss-Kronrod
//      split at the points +-lambda_i c s where the tail mass sits, equal
//      lambdas evaluated once; outer integral over U by adaptive Gauss-Kronrod
//      where U's density is within e^-(55 + log 2m) of its mode. A few ms per
//      probability, tens of ms per critical value. Comparisons
//      of means with a control in a one-way model without covariates have
//      lambda_i = sqrt(n_i / (n_i + n_0)) (many_to_one_lambda).
//      error_bound is the Gauss-Kronrod error estimate (|Kronrod - Gauss|,
//      pessimistic), method "product-form integral".
//    * Any other correlation (covariates, unequal variances): randomized
//      quasi-Monte Carlo after Genz (1992) and Genz & Bretz (2002): separation
//      of variables on the Cholesky factor with the variables ordered by
//      increasing expected interval probability, the chi variable as an extra
//      integration variable, a Richtmyer (Kronecker) sequence of square roots
//      of primes with the baker's (tent) transform and antithetic points, 16
//      random shifts from a fixed seed (results are deterministic). The
//      product form nearest to the matrix (lambda_i^2 = R_ij R_ik / R_jk) is
//      used as a control variate: its exact probability plus the QMC estimate
//      of the difference, both integrands at the same points in the same
//      variable order (unbiased; the variance is small when the matrix is
//      close to product form, as with a few covariates). error_bound is the
//      half-width of a 99.9% confidence interval from the 16 shift means
//      (Student t, 15 df: 4.07 standard errors); points are doubled until it is
//      below the requested absolute tolerance or 2e6 integrand evaluations
//      have been spent (about 1 s at tolerance 1e-5 for a matrix far from
//      product form). Quantiles: secant steps from the nearest product form's
//      critical value on the estimate with the number of points fixed (common
//      random numbers); error_bound is the probability's error over the
//      density. Method "Genz-Bretz randomized QMC".
//    A correlation matrix is treated as product form when a lambda with
//    |lambda_i| < 1 reproduces every off-diagonal entry within 1e-10.
//
// Domain: arguments outside it (k not an integer in 2..10000, df < 1, NaN
// statistics, probabilities outside (0, 1)) give NaN, which the reports turn
// into NULL; a malformed correlation matrix throws groupfit::error.
#pragma once

#include <Eigen/Dense>
#include <optional>
#include <vector>

namespace groupfit::dist {

// ---------------------------------------------------------------------------
// Studentized range
// ---------------------------------------------------------------------------

/// P(Q <= q) for the studentized range of k means (integer, 2..10000) with df
/// degrees of freedom (df >= 1, or +inf for the range of k standard normals).
/// q <= 0 gives 0. Absolute accuracy about 1e-13.
double srange_cdf(double q, double k, double df);

/// P(Q > q), computed directly (not as 1 - cdf): keeps its relative accuracy
/// far into the tail (until it underflows below about 1e-308).
double srange_upper_p(double q, double k, double df);

/// The q with P(Q <= q) = p, for p in (0, 1); p = 0 gives 0 and p = 1 gives
/// +inf. Relative accuracy about 1e-12.
double srange_quantile(double p, double k, double df);

// ---------------------------------------------------------------------------
// Dunnett's many-to-one comparisons
// ---------------------------------------------------------------------------

enum class dunnett_sides {
    two_sided,  ///< max_i |T_i|
    one_sided   ///< max_i T_i (for min_i T_i use -c: same distribution)
};

/// A probability or critical value with an estimate of its absolute error
/// and the method that produced it (a string literal).
struct dunnett_result {
    double value;
    double error_bound;
    const char* method;
};

/// lambda_i = sqrt(n_i / (n_i + n_0)) for comparisons of treatment means (row
/// counts or weight sums n_i) with a control of size n_0 in a one-way model
/// without covariates: the correlation of the t statistics is lambda_i lambda_j.
Eigen::VectorXd many_to_one_lambda(const Eigen::VectorXd& n_treatment, double n_control);

/// The lambda (|lambda_i| < 1, first nonzero entry positive) with
/// corr_ij = lambda_i lambda_j for all i != j within `tolerance`, or nothing
/// if corr has no such form. Throws groupfit::error for a non-square matrix.
std::optional<Eigen::VectorXd> product_form_factors(const Eigen::MatrixXd& corr,
                                                    double tolerance = 1e-10);

/// P(max_i |T_i| <= c) (two-sided) or P(max_i T_i <= c) (one-sided) for the
/// product-form correlation lambda_i lambda_j; df >= 1 or +inf. Throws
/// groupfit::error if some |lambda_i| >= 1 or lambda is empty.
dunnett_result dunnett_product_cdf(double c, const Eigen::VectorXd& lambda, double df,
                                   dunnett_sides sides);
/// 1 - dunnett_product_cdf, computed directly (relative accuracy in the tail).
dunnett_result dunnett_product_upper_p(double c, const Eigen::VectorXd& lambda, double df,
                                       dunnett_sides sides);
/// The critical value c with dunnett_product_cdf(c) = level, level in (0, 1).
dunnett_result dunnett_product_quantile(double level, const Eigen::VectorXd& lambda, double df,
                                        dunnett_sides sides);

/// The same for any correlation matrix `corr` (m x m, symmetric, unit
/// diagonal, positive definite; throws groupfit::error otherwise): the
/// product-form integral when corr has that form, else randomized QMC to the
/// absolute tolerance `qmc_tolerance`.
dunnett_result dunnett_cdf(double c, const Eigen::MatrixXd& corr, double df, dunnett_sides sides,
                           double qmc_tolerance = 1e-5);
dunnett_result dunnett_upper_p(double c, const Eigen::MatrixXd& corr, double df,
                               dunnett_sides sides, double qmc_tolerance = 1e-5);
dunnett_result dunnett_quantile(double level, const Eigen::MatrixXd& corr, double df,
                                dunnett_sides sides, double qmc_tolerance = 1e-5);

/// Single-step adjusted p-values of the observed statistics t (one per
/// comparison, in the order of corr's rows): P(max_j |T_j| >= |t_i|) for
/// two-sided, P(max_j T_j >= t_i) for one-sided.
std::vector<dunnett_result> dunnett_adjusted_p(const Eigen::VectorXd& t, const Eigen::MatrixXd& corr,
                                               double df, dunnett_sides sides,
                                               double qmc_tolerance = 1e-5);

// ---------------------------------------------------------------------------
// Dunnett for covariances of the form diag(a) + V V' (many-to-one comparisons
// in a model with covariates)
// ---------------------------------------------------------------------------
/// The covariance (over sigma^2) of m comparisons with a control, written as
/// diag(a) + V V' with a_i > 0 and V m x r: in a one-factor model a_i = 1/W_i,
/// V's first column is 1/sqrt(W_0) (the shared control) and the others are the
/// covariate loadings. Given w ~ N(0, I_r) the comparisons are independent, so
/// P(max |T_i| <= c) = E_{w,S} prod_i P(|T_i| <= c | w, S): an (r + 1)-
/// dimensional integral instead of an m-dimensional one.
struct lowrank_covariance {
    Eigen::VectorXd a;
    Eigen::MatrixXd V;
};
/// Adjusted p-values (as dunnett_adjusted_p) and the critical value at `level`
/// for such a covariance, computed together. Method: the product form of the
/// first column of V (exact integral, interpolated inner integrals) as a
/// control variate, plus the difference of the two conditional integrands
/// estimated by randomized QMC over (w, S) (Richtmyer points, baker's transform,
/// antithetic pairs, 16 random shifts from a fixed seed) at Chebyshev nodes of
/// the threshold (in asinh c) with common points, and interpolated between
/// them. Points are doubled until the 99.9% half-width is below 1e-6 or 1e7
/// node-by-comparison products are spent (about 1e-4 for 10 to 50 comparisons
/// with 2 covariates; 3.5 s for 50, against minutes for the general QMC in 50
/// dimensions). error_bound: the product form's error plus that half-width
/// (largest over the nodes). Method "low-rank conditional integral
/// (randomized QMC, product-form control)". With r = 1 the product form alone
/// (exact). groupfit_pairs uses it from 8 comparisons on.
struct dunnett_family_result {
    std::vector<dunnett_result> adjusted_p;
    dunnett_result quantile;
};
dunnett_family_result dunnett_lowrank(const Eigen::VectorXd& t, const lowrank_covariance& cov,
                                      double df, dunnett_sides sides, double level);

}  // namespace groupfit::dist
