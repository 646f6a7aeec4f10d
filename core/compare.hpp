// groupfit core: comparisons from the fitted model — pairwise and many-to-one
// comparisons of adjusted means with multiplicity control, and user contrasts.
//
// Every comparison is a linear function of the fitted parameters, so its
// standard error comes from the model's covariance: comparisons are correct
// with covariates (they are differences of adjusted means, which do not depend
// on the covariate values when slopes are common), and never computed from raw
// group summaries.
//
// Adjustments (adjust=):
//   none        per-comparison p-values and intervals
//   bonferroni  p * m (capped at 1); simultaneous intervals at level 1 - alpha/m
//   sidak       1 - (1 - p)^m; simultaneous intervals at level (1 - alpha)^(1/m)
//   holm        Holm's step-down Bonferroni; intervals are per comparison and
//               labelled not simultaneous
//   bh          Benjamini-Hochberg false-discovery-rate adjusted p-values;
//               intervals per comparison, labelled not simultaneous
//   tukey       Tukey-Kramer: |t| * sqrt(2) referred to the studentized range
//               of all L levels; simultaneous intervals (exact for equal n
//               without covariates; for unequal n without covariates proven
//               conservative by Hayter 1984; with covariates an approximation
//               that is conservative in published simulations, not proven)
//   scheffe     t^2 / (L - 1) referred to F(L - 1, df); simultaneous over all
//               contrasts
//   dunnett     many-to-one (vs=), max |t| referred to the multivariate t with
//               the correlation of the comparisons implied by the model
// In every simultaneous method the interval excludes 0 exactly when the
// adjusted p-value is below 1 - conf. A comparison that cannot be computed
// (not estimable, no standard error) gets NULLs and a note, and is left out of
// the family (m counts computable comparisons only).
#pragma once

#include <string_view>

#include "report.hpp"

namespace groupfit {

const std::vector<std::string>& pairs_columns();
const std::vector<std::string>& contrast_columns();

/// All pairs of levels (level_a before level_b in report order, estimate =
/// mean_a - mean_b), or every level against the control named by vs=
/// (estimate = level - control).
table pairs_report(const fit& f);

/// User contrasts, e.g. "a=1, b=-0.5, c=-0.5; a=1, d=-1": one row per
/// contrast, then one row with the joint F test of the set. Weights that do
/// not sum to zero estimate a combination of adjusted means (at the covariate
/// values of at=, default their means) and are labelled so.
table contrast_report(const fit& f, std::string_view weights);

namespace detail {
/// Holm step-down adjusted p-values (NaN entries are left out and stay NaN).
std::vector<double> holm(const std::vector<double>& p);
/// Benjamini-Hochberg adjusted p-values (NaN entries left out).
std::vector<double> benjamini_hochberg(const std::vector<double>& p);
}  // namespace detail

}  // namespace groupfit
