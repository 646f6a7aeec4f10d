// groupfit core: the distributions used for p-values and intervals.
//
// Thin value-returning wrappers over Boost.Math with one project-wide policy:
// upper tails come from cdf(complement(...)), never 1 - cdf(...), so that small
// p-values keep their relative accuracy. Arguments outside the domain
// (df <= 0, non-finite statistics) give NaN, which the reports turn into NULL.
#pragma once

namespace groupfit::dist {

/// Two-sided p-value of a t statistic with df degrees of freedom.
double t_two_sided_p(double t, double df);
/// Quantile q of Student's t with df degrees of freedom (q in (0,1)).
double t_quantile(double q, double df);
/// Upper-tail p-value of an F statistic with (df1, df2) degrees of freedom.
double f_upper_p(double f, double df1, double df2);
/// Quantile q of the F distribution with (df1, df2) degrees of freedom.
double f_quantile(double q, double df1, double df2);

}  // namespace groupfit::dist
