// groupfit core: contrast codings of the grouping, chosen after the data pass.
//
// A coding is described by what each coefficient estimates: row i of an L x L
// matrix K gives the weights over the L level means (report order) whose
// combination the coefficient equals. Row 0 is the intercept. The codes of the
// design matrix are K^-1; they are never needed, because the fit works in the
// level-means parametrisation and every coefficient is K_i mu. K is produced
// one row at a time, so a 10,000-level model never holds an L x L matrix.
//
//   dummy            intercept = mean of the base level (default: first level);
//                    coefficient j = mean_j - mean_base
//   effect           intercept = unweighted mean of level means; coefficient
//                    j = mean_j - that, for every level but the omitted one
//                    (base=, default: last level)
//   weighted_effect  as effect, with the weight-sum-weighted mean of level means
//   helmert          coefficient j = mean_j - mean of the levels after j
//   reverse_helmert  coefficient j = mean_j - mean of the levels before j
//   successive       coefficient j = mean_j - mean_(j-1)
//   polynomial       coefficient d = orthonormal polynomial contrast of degree d
//                    over equally spaced scores, or the numeric level values
//                    (spacing=values); leading coefficient positive
//   custom           coefficient i = the i-th row of custom= weights
// All but dummy and weighted_effect take the unweighted mean of level means as
// the intercept.
#pragma once

#include <Eigen/Dense>
#include <string>
#include <vector>

#include "fit.hpp"

namespace groupfit {

/// What a coding needs to know about one factor: its levels in report order,
/// their labels and weight sums, and whether the model has covariates (for
/// the wording of `compares`).
struct coded_levels {
    std::vector<const level*> levels;
    std::vector<std::string> labels;
    std::vector<double> weights;
    bool covariates = false;
    /// Index of the level with this label; throws "<option> names an unknown
    /// level ..." (option: "options: base", ...).
    std::size_t find(const std::string& label, const char* option) const;
};

class coding {
public:
    /// Validates the coding options against the fitted levels; throws
    /// groupfit::error naming the option.
    explicit coding(const fit& f);
    /// The same for one factor of a crossed model; base= applies only when
    /// `use_base` (it names a level of this factor).
    coding(coded_levels levels, const options& o, bool use_base);
    std::size_t size() const { return size_; }  // number of rows: the intercept + L-1
    Eigen::VectorXd row(std::size_t i) const;
    std::string label(std::size_t i) const;      // the level or trend a row is named by
    std::string compares(std::size_t i) const;   // the row in plain words

private:
    std::size_t level_of(std::size_t i) const;   // for dummy/effect: the level of row i
    coded_levels v_;
    spacing_kind spacing_;
    coding_kind kind_;
    std::size_t L_, size_, base_ = 0;
    Eigen::MatrixXd poly_;                       // polynomial: L x L, column d = degree d
    std::vector<std::vector<double>> custom_;
};

/// Label of a polynomial degree: linear, quadratic, cubic, quartic, degree 5...
std::string degree_name(std::size_t d);

}  // namespace groupfit
