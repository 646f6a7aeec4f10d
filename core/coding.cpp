#include "coding.hpp"

#include <cmath>

#include "error.hpp"

namespace groupfit {

namespace {
constexpr std::size_t max_polynomial_levels = 500;

std::string number(double v) { return short_real(v); }
}  // namespace

std::string degree_name(std::size_t d) {
    static const char* names[] = {"constant", "linear", "quadratic", "cubic", "quartic"};
    return d < 5 ? names[d] : "degree " + std::to_string(d);
}

namespace {
coded_levels levels_of(const fit& f) {
    coded_levels v;
    for (std::size_t i = 0; i < f.levels(); ++i) {
        v.levels.push_back(&f.level_at(i));
        v.labels.push_back(f.level_label(i));
        v.weights.push_back(f.level_weight(i));
    }
    v.covariates = f.covariates() > 0;
    return v;
}
}  // namespace

std::size_t coded_levels::find(const std::string& label, const char* option) const {
    for (std::size_t i = 0; i < labels.size(); ++i)
        if (labels[i] == label) return i;
    throw_unknown_level(option, label, labels);
}

coding::coding(const fit& f) : coding(levels_of(f), f.opts(), true) {}

coding::coding(coded_levels levels, const options& o, bool use_base)
    : v_(std::move(levels)), spacing_(o.spacing), kind_(o.coding), L_(v_.labels.size()),
      size_(v_.labels.size()) {
    if (kind_ == coding_kind::dummy) base_ = 0;
    if (kind_ == coding_kind::effect || kind_ == coding_kind::weighted_effect) base_ = L_ - 1;
    if (o.has_base && use_base) base_ = v_.find(o.base, "options: base");
    if (kind_ == coding_kind::polynomial) {
        if (L_ > max_polynomial_levels)
            throw error("options: coding=polynomial supports at most " +
                        std::to_string(max_polynomial_levels) + " levels; this model has " +
                        std::to_string(L_));
        Eigen::VectorXd s(L_);
        for (std::size_t i = 0; i < L_; ++i) {
            if (o.spacing == spacing_kind::values) {
                if (!v_.levels[i]->is_numeric())
                    throw error("options: spacing=values needs numeric levels; level '" +
                                v_.labels[i] + "' is not a number");
                s[i] = v_.levels[i]->numeric_value();
            } else {
                s[i] = double(i + 1);
            }
        }
        // Discrete orthonormal polynomials by the three-term (Stieltjes)
        // recurrence on centred, scaled scores: stable for every degree.
        const double mean = s.mean();
        Eigen::VectorXd t = s.array() - mean;
        const double scale = t.cwiseAbs().maxCoeff();
        if (scale > 0) t /= scale;
        poly_ = Eigen::MatrixXd::Zero(L_, L_);
        poly_.col(0).setConstant(1.0 / std::sqrt(double(L_)));
        for (std::size_t d = 1; d < L_; ++d) {
            Eigen::VectorXd q = t.cwiseProduct(poly_.col(d - 1));
            // Full re-orthogonalisation (twice) keeps the columns orthonormal to
            // rounding even for many levels.
            for (int pass = 0; pass < 2; ++pass)
                for (std::size_t e = 0; e < d; ++e) q -= poly_.col(e) * poly_.col(e).dot(q);
            const double nq = q.norm();
            if (!(nq > 1e-12 * std::sqrt(double(L_))))
                throw error("options: spacing=values needs distinct level values");
            poly_.col(d) = q / nq;
        }
    }
    if (kind_ == coding_kind::custom) {
        custom_ = o.custom;
        if (custom_.size() != L_ - 1)
            throw error("options: custom needs " + std::to_string(L_ - 1) +
                        " rows of weights (one per coefficient, levels - 1), not " +
                        std::to_string(custom_.size()));
        Eigen::MatrixXd k(L_, L_);
        k.row(0).setConstant(1.0 / double(L_));
        for (std::size_t i = 0; i < custom_.size(); ++i) {
            if (custom_[i].size() != L_)
                throw error("options: custom row " + std::to_string(i + 1) + " has " +
                            std::to_string(custom_[i].size()) + " weights; the model has " +
                            std::to_string(L_) + " levels");
            for (std::size_t j = 0; j < L_; ++j) k(i + 1, j) = custom_[i][j];
        }
        Eigen::FullPivLU<Eigen::MatrixXd> lu(k);
        lu.setThreshold(1e-10);
        if (lu.rank() < static_cast<Eigen::Index>(L_))
            throw error("options: the custom rows together with the mean of all levels are "
                        "linearly dependent (rank " + std::to_string(lu.rank()) + " of " +
                        std::to_string(L_) + "), so they do not define a coding");
    }
}

std::size_t coding::level_of(std::size_t i) const {
    // Rows 1..L-1 name the levels other than the base, in order.
    std::size_t j = i - 1;
    return j >= base_ ? j + 1 : j;
}

Eigen::VectorXd coding::row(std::size_t i) const {
    Eigen::VectorXd k = Eigen::VectorXd::Zero(L_);
    const double uniform = 1.0 / double(L_);
    auto weighted = [&] {
        Eigen::VectorXd w(L_);
        for (std::size_t j = 0; j < L_; ++j) w[j] = v_.weights[j];
        return Eigen::VectorXd(w / w.sum());
    };
    switch (kind_) {
    case coding_kind::dummy:
        k[base_] = i == 0 ? 1.0 : -1.0;
        if (i) k[level_of(i)] += 1.0;
        return k;
    case coding_kind::effect:
        k.setConstant(i == 0 ? uniform : -uniform);
        if (i) k[level_of(i)] += 1.0;
        return k;
    case coding_kind::weighted_effect:
        k = weighted();
        if (i) k = -k, k[level_of(i)] += 1.0;
        return k;
    case coding_kind::helmert:
        if (i == 0) return k.setConstant(uniform);
        k[i - 1] = 1.0;
        for (std::size_t j = i; j < L_; ++j) k[j] = -1.0 / double(L_ - i);
        return k;
    case coding_kind::reverse_helmert:
        if (i == 0) return k.setConstant(uniform);
        k[i] = 1.0;
        for (std::size_t j = 0; j < i; ++j) k[j] = -1.0 / double(i);
        return k;
    case coding_kind::successive:
        if (i == 0) return k.setConstant(uniform);
        k[i] = 1.0;
        k[i - 1] = -1.0;
        return k;
    case coding_kind::polynomial:
        if (i == 0) return k.setConstant(uniform);
        return poly_.col(i);
    case coding_kind::custom:
        if (i == 0) return k.setConstant(uniform);
        for (std::size_t j = 0; j < L_; ++j) k[j] = custom_[i - 1][j];
        return k;
    }
    return k;
}

std::string coding::label(std::size_t i) const {
    if (i == 0) return "intercept";
    switch (kind_) {
    case coding_kind::dummy:
    case coding_kind::effect:
    case coding_kind::weighted_effect: return v_.labels.at(level_of(i));
    case coding_kind::helmert: return v_.labels.at(i - 1);
    case coding_kind::reverse_helmert:
    case coding_kind::successive: return v_.labels.at(i);
    case coding_kind::polynomial: return degree_name(i);
    case coding_kind::custom: return "custom " + std::to_string(i);
    }
    return {};
}

std::string coding::compares(std::size_t i) const {
    const bool cov = v_.covariates;
    const std::string at0 = cov ? " where every covariate is 0" : "";
    auto lab = [&](std::size_t j) { return v_.labels.at(j); };
    if (i == 0) {
        switch (kind_) {
        case coding_kind::dummy: return "mean of " + lab(base_) + at0;
        case coding_kind::weighted_effect: return "weighted mean of all levels" + at0;
        default: return "mean of all levels" + at0;
        }
    }
    switch (kind_) {
    case coding_kind::dummy: return lab(level_of(i)) + " vs " + lab(base_);
    case coding_kind::effect: return lab(level_of(i)) + " vs mean of all levels";
    case coding_kind::weighted_effect:
        return lab(level_of(i)) + " vs weighted mean of all levels";
    case coding_kind::helmert:
        return i == L_ - 1 ? lab(i - 1) + " vs " + lab(L_ - 1)
                           : lab(i - 1) + " vs mean of later levels (" + lab(i) + " to " +
                                 lab(L_ - 1) + ")";
    case coding_kind::reverse_helmert:
        return i == 1 ? lab(1) + " vs " + lab(0)
                      : lab(i) + " vs mean of earlier levels (" + lab(0) + " to " + lab(i - 1) + ")";
    case coding_kind::successive: return lab(i) + " vs " + lab(i - 1);
    case coding_kind::polynomial:
        return degree_name(i) + " trend over levels in order" +
               (spacing_ == spacing_kind::values ? " (spaced by level value)" : "");
    case coding_kind::custom: {
        std::string s;
        const auto& w = custom_[i - 1];
        for (std::size_t j = 0; j < L_; ++j) {
            if (w[j] == 0.0) continue;
            if (!s.empty()) s += w[j] < 0 ? " - " : " + ";
            else if (w[j] < 0) s += "-";
            s += number(std::fabs(w[j])) + "*" + lab(j);
        }
        double total = 0;
        for (double v : w) total += v;
        if (std::fabs(total) > 1e-12) s += " (weights sum to " + number(total) + ", not a contrast)";
        return s;
    }
    }
    return {};
}

}  // namespace groupfit
