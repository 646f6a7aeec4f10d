// groupfit core: the least-squares fit of a one-factor model with common slopes,
//   y = mu_g + x'beta + e,   e ~ N(0, sigma^2 / w),
// computed from a summary without revisiting rows.
//
// How: the rows of every cell's factor except the first (the within-cell part)
// are merged into one pooled double-double factor over [x, y]; a pass over its
// columns in order reveals the rank (a covariate whose remaining norm is below
// `alias_tolerance` of its own norm is aliased and fixed at zero) and gives beta
// and the residual sum of squares. The cell means then give
// mu_g = ybar_g - xbar_g'beta. All of this is done in shifted coordinates (every
// column minus its weighted grand mean) and only the reports move back to the
// raw scale. Cost: O(cells x (p+2)^2 + p^3), independent of the number of rows.
//
// Every reported number is a linear function a'mu + g'beta + c of the
// parameters; `evaluate` returns its value and standard error, with
// Var = sigma^2 [ sum a_g^2 / W_g + (D'a - g)' (R'R)^-1 (D'a - g) ],
// where W_g is the cell's weight sum and D holds the cells' covariate means.
#pragma once

#include <Eigen/Dense>
#include <cstdint>
#include <string>
#include <vector>

#include "options.hpp"
#include "summary.hpp"

namespace groupfit {

/// Relative norm below which a covariate column counts as aliased.
inline constexpr double alias_tolerance = 1e-10;

/// A linear function a'mu + g'beta + c of the parameters (levels in report
/// order; g over all covariates, raw scale handled by the caller through c and g).
struct linear_function {
    Eigen::VectorXd a;
    Eigen::VectorXd g;
    double c = 0.0;
};

struct estimate {
    double value;
    double std_error;   // NaN when there are no residual degrees of freedom
    bool estimable = true;
};

class fit {
public:
    fit(const summary& s, const options& o);
    /// A fit refers to its summary: it must outlive the fit.
    fit(summary&&, const options&) = delete;

    // --- the levels, in report order (ascending, or as set by order=)
    std::size_t levels() const { return cell_.size(); }
    const level& level_at(std::size_t i) const { return s_->cell_level(cell_[i]); }
    std::string level_label(std::size_t i) const { return labels_[i]; }
    /// Report index of a level named by the user; throws "<where> names an
    /// unknown level ..." (where: "options: base", "weights: a contrast", ...).
    std::size_t find_level(const std::string& label, const char* where) const;
    std::int64_t level_rows(std::size_t i) const { return s_->cell_rows(cell_[i]); }
    double level_weight(std::size_t i) const { return w_[i]; }
    /// Observed (weighted) mean of the response in level i, raw scale.
    double level_mean(std::size_t i) const { return s_->cell_mean(cell_[i], p_); }
    /// Observed standard deviation of the response in level i (NaN for one row).
    double level_sd(std::size_t i) const;
    /// Observed mean of covariate j over all rows used (weighted), raw scale.
    double covariate_mean(int j) const { return ox_[j]; }
    /// Covariate values for adjusted means: the means, overridden by at=
    /// (raw scale). Throws when at= names an unknown covariate.
    Eigen::VectorXd at_values() const;

    // --- names
    const std::string& group_name() const { return names_[0]; }
    const std::string& covariate_name(int j) const { return names_[j + 1]; }
    int covariates() const { return p_; }
    bool weighted() const { return s_->weighted(); }

    // --- fit results
    std::int64_t rows() const { return n_; }
    double weight_sum() const { return wsum_; }
    int rank() const { return static_cast<int>(levels()) + static_cast<int>(kept_.size()); }
    int parameters() const { return static_cast<int>(levels()) + p_; }
    double df_resid() const { return double(n_) - rank(); }
    double sse() const { return sse_; }
    double sigma2() const;  // NaN without residual degrees of freedom
    bool aliased(int j) const { return alias_[j]; }
    const std::string& alias_reason(int j) const { return alias_reason_[j]; }
    double slope(int j) const { return beta_[j]; }  // NaN when aliased

    estimate evaluate(const linear_function& f) const;
    /// The adjusted mean of level i at covariates `at` (raw scale): the same as
    /// evaluate(level_combination(e_i, at)) in O(p^2) instead of O(levels).
    estimate level_mean_at(std::size_t i, const Eigen::VectorXd& at) const;
    /// For every level i, the estimate of mu_i - sum_j w_j mu_j (w: weights
    /// over levels, summing to 1; the difference needs no covariate value):
    /// evaluate(level_combination(e_i - w, any)) for all i at once, in
    /// O(levels p^2) instead of O(levels^2) (the general evaluate when a
    /// covariate is aliased).
    std::vector<estimate> deviations_from(const Eigen::VectorXd& w) const;
    /// Covariance of two linear functions divided by sigma^2.
    double scaled_covariance(const linear_function& f1, const linear_function& f2) const;
    /// The covariate part of that covariance as a loading vector z (over the
    /// kept covariates): scaled_covariance(f1, f2) = sum a1 a2 / W + z1 . z2.
    Eigen::VectorXd covariance_loading(const linear_function& f) const;

    /// A linear function of a raw-scale quantity: sum_i k_i * (mean of level i at
    /// covariates = at), with `at` on the raw scale.
    linear_function level_combination(const Eigen::VectorXd& k, const Eigen::VectorXd& at) const;
    linear_function slope_function(int j) const;

    // --- sums of squares (all non-negative sums, no differences of totals)
    double ss_group_unadjusted() const { return ss_group_seq_; }
    double ss_group_adjusted() const { return ss_group_adj_; }
    double ss_covariate_sequential(int j) const;  // after the grouping and earlier covariates
    double ss_covariate_partial(int j) const;     // after the grouping and all other covariates
    double ss_total() const;                       // corrected for the weighted mean
    double ss_model() const;

    /// 2-norm condition number of the model matrix (level indicators and raw
    /// covariates, columns scaled to unit length); NaN when rank-deficient.
    double condition_number() const;

    const options& opts() const { return opt_; }
    const summary& data() const { return *s_; }

private:
    Eigen::VectorXd d_prime_a(const Eigen::VectorXd& a) const;  // over kept covariates
    double g_quadratic(const Eigen::VectorXd& u) const;          // u' (R'R)^-1 u

    const summary* s_;
    options opt_;
    int p_;
    std::vector<std::size_t> cell_;      // report order -> summary cell
    std::vector<std::string> labels_;
    std::vector<std::string> names_;
    Eigen::VectorXd w_;                  // weight sum per level
    Eigen::MatrixXd xb_;                 // L x p covariate means, shifted
    Eigen::VectorXd yb_;                 // response means, shifted
    Eigen::VectorXd ox_;                 // covariate origins (weighted grand means)
    double oy_ = 0;
    std::int64_t n_ = 0;
    double wsum_ = 0;

    std::vector<int> kept_;              // kept covariate indices, in order
    std::vector<bool> alias_;
    std::vector<std::string> alias_reason_;
    std::vector<Eigen::VectorXd> alias_delta_;   // per covariate: coefficients on kept
    Eigen::MatrixXd r_;                  // kept x kept upper triangular
    Eigen::VectorXd qty_;                // kept
    Eigen::VectorXd beta_;               // p, NaN where aliased
    Eigen::VectorXd mu_;                 // L, shifted scale at x = origin
    std::vector<ddouble> betad_, mud_;   // the same in double-double
    double sse_ = 0;
    double ss_group_seq_ = 0, ss_group_adj_ = 0;
    Eigen::MatrixXd within_;             // the pooled within factor R (p+1 square)
};

}  // namespace groupfit
