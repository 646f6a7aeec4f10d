// groupfit core: crossed factors (groupfit_cross), interactions and covariate
// slopes that vary by group, computed from the same per-cell summary.
//
// The model of a crossed summary is chosen after the data pass (options):
//   terms=full (every interaction), main (main effects only) or two_way (main
//   effects and all two-way interactions); slopes=common (one slope per
//   covariate), separate (the slopes vary by level of the first factor) or cell
//   (the slopes vary like the cell means: by cell in the full factorial).
//
// How: every term is spanned by Kronecker products of orthonormal sum-to-zero
// (Helmert) columns of its factors, so the column space of a term, and of any
// set of terms, does not depend on level order or on any coding. The least
// squares problem is rebuilt from the cells without revisiting rows: one row per
// observed cell (sqrt(weight sum) times the cell's design row and means) plus
// the rows of the within-cell factors (pooled over all cells when slopes are
// common, per cell otherwise), all in coordinates shifted by the weighted grand
// means. A column-pivoting Householder QR of that small matrix (columns scaled
// to unit length) gives the rank, the residual sum of squares and, for every
// linear function of the parameters, whether it is estimable, its value and its
// standard error. Sums of squares of every type are differences of residual
// sums of squares of nested column sets, so their degrees of freedom are rank
// differences: an empty cell lowers the degrees of freedom that a term
// actually tests, and the tests say so.
//
// Cost: O(cells x (p+2)^2) to read the summary, O(rows' x columns^2) per QR
// with rows' = cells + (p+1) (common slopes) or cells x (p+2) (other slopes).
#pragma once

#include <string>
#include <string_view>
#include <vector>

#include "compare.hpp"
#include "options.hpp"
#include "report.hpp"
#include "summary.hpp"

namespace groupfit {

/// Most factors in one groupfit_cross.
inline constexpr int max_factors = 8;
/// Most level combinations (observed or not) of a crossed model.
inline constexpr std::size_t max_combinations = 1000000;
/// Most columns of a crossed model's design.
inline constexpr std::size_t max_design_columns = 4000;

/// The value groupfit_cross returns: a BLOB that names one cell of crossed
/// factors. Levels are normalised like the grouping argument (3.0 is 3).
std::string encode_cross(const std::vector<level>& parts);
/// Decodes a groupfit_cross value; false when the bytes are not one.
bool decode_cross(std::string_view bytes, std::vector<level>& parts);
/// Number of crossed factors in a summary: 0 for a plain grouping, K >= 2 when
/// every cell came from groupfit_cross with K values. Throws when the cells mix
/// arities or mix crossed and plain values.
int crossed_factors(const summary& s);

/// Throws when the new cell `c` does not have the same factors (arity of
/// groupfit_cross, or plain) as cell 0. Called by the aggregate on new cells.
void check_same_factors(const summary& s, std::size_t c);

/// Reports of a crossed model (same columns as the one-factor reports).
table cross_coef_report(const summary& s, const options& o);
table cross_levels_report(const summary& s, const options& o);
table cross_deviations_report(const summary& s, const options& o);
table cross_tests_report(const summary& s, const options& o);
table cross_summary_report(const summary& s, const options& o);
table cross_pairs_report(const summary& s, const options& o);
table cross_contrast_report(const summary& s, const options& o, std::string_view weights);

/// The homogeneity-of-slopes test of a one-factor model with covariates (the
/// grouping-by-covariate interaction), as a row of tests_columns(); empty
/// without covariates. From the fit (the common-slopes model) and its summary's
/// cell factors; no design matrix.
std::vector<value> slopes_homogeneity_row(const fit& f);

}  // namespace groupfit
