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

#include "multcomp.hpp"
#include "report.hpp"

namespace groupfit {

const std::vector<std::string>& pairs_columns();
const std::vector<std::string>& contrast_columns();

/// A set of means that comparisons and contrasts are made over: the levels of a
/// one-factor model, or the cells or marginal means of a crossed model. Every
/// combination sum k_i mean_i is a linear function of the model's parameters.
class mean_family {
public:
    virtual ~mean_family() = default;
    virtual std::size_t size() const = 0;
    virtual std::string label(std::size_t i) const = 0;
    /// Index of the mean with this label; throws "<where> names an unknown
    /// level ..." (where: "options: vs", "weights: a contrast").
    virtual std::size_t find(const std::string& label, const char* option) const = 0;
    /// Value and standard error of sum_i k_i mean_i.
    virtual estimate combine(const Eigen::VectorXd& k) const = 0;
    /// Covariance of two combinations divided by sigma^2.
    virtual double scaled_covariance(const Eigen::VectorXd& k1, const Eigen::VectorXd& k2) const = 0;
    virtual double df() const = 0;
    virtual double sigma2() const = 0;
    /// The covariate values the means are taken at ("x1=2.5, x2=3"), or empty.
    virtual std::string at_text() const = 0;
    /// Why a combination is not estimable, for the note column.
    virtual std::string not_estimable_reason() const = 0;
    /// For comparisons of `treated` means with the `control` mean: their
    /// covariance over sigma^2 as diag(a) + V V' (dist::lowrank_covariance),
    /// when the family knows it; false otherwise.
    virtual bool many_to_one_lowrank(std::size_t control, const std::vector<std::size_t>& treated,
                                     dist::lowrank_covariance& out) const {
        (void)control, (void)treated, (void)out;
        return false;
    }
};

/// Appends the pairwise (or many-to-one, vs=) comparisons of one family to t,
/// with `within` in the within column (NULL when empty).
void pairs_rows(const mean_family& f, const options& o, const std::string& within, table& t);
/// Contrasts over one family (the weights text names its labels).
table contrast_report(const mean_family& f, const options& o, std::string_view weights);

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
