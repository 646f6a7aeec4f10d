#include "fit.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numeric>

#include "error.hpp"

namespace groupfit {

namespace {
constexpr double nan = std::numeric_limits<double>::quiet_NaN();

/// A small square-root-free factor over k columns (T = double or ddouble).
template <class T>
struct factor {
    int k;
    std::vector<T> d, rbar;
    explicit factor(int k_) : k(k_), d(k_, T(0.0)), rbar(k_ * (k_ - 1) / 2, T(0.0)) {}
    T include(std::vector<T>& row, T w, int first = 0) {
        return detail::include_row<T>(k, d.data(), rbar.data(), row.data(), w, first);
    }
    T r(int i, int j) const {
        return i == j ? T(1.0) : j > i ? rbar[detail::rbar_index(k, i, j)] : T(0.0);
    }
    T& at(int i, int j) { return rbar[detail::rbar_index(k, i, j)]; }
};
}  // namespace

fit::fit(const summary& s, const options& o) : s_(&s), opt_(o), p_(s.covariates()) {
    if (s.cells() == 0) throw error("the model has no rows");
    // Names: the grouping, then the covariates.
    if (o.names.size() > static_cast<std::size_t>(p_) + 1)
        throw error("options: names lists " + std::to_string(o.names.size()) +
                    " names but the model has a grouping and " + std::to_string(p_) +
                    " covariate(s)");
    names_.push_back("group");
    for (int j = 0; j < p_; ++j) names_.push_back("x" + std::to_string(j + 1));
    for (std::size_t i = 0; i < o.names.size(); ++i) names_[i] = o.names[i];

    // Level order: ascending, with the levels named by order= first.
    std::vector<std::size_t> asc(s.cells());
    std::iota(asc.begin(), asc.end(), 0);
    std::sort(asc.begin(), asc.end(),
              [&](std::size_t a, std::size_t b) { return s.cell_level(a) < s.cell_level(b); });
    std::vector<std::string> asc_labels;
    for (auto c : asc) asc_labels.push_back(s.cell_level(c).label());
    std::vector<bool> used(asc.size(), false);
    for (const auto& name : o.order) {
        auto it = std::find(asc_labels.begin(), asc_labels.end(), name);
        if (it == asc_labels.end())
            throw_unknown_level("options: order", name, asc_labels);
        std::size_t i = it - asc_labels.begin();
        if (used[i]) throw error("options: order names level '" + name + "' twice");
        used[i] = true;
        cell_.push_back(asc[i]);
        labels_.push_back(name);
    }
    for (std::size_t i = 0; i < asc.size(); ++i)
        if (!used[i]) cell_.push_back(asc[i]), labels_.push_back(asc_labels[i]);

    const std::size_t L = cell_.size();
    const int k = p_ + 2;
    w_.resize(L);
    for (std::size_t i = 0; i < L; ++i) {
        w_[i] = s.cell_d(cell_[i])[0].value();
        n_ += s.cell_rows(cell_[i]);
        wsum_ += w_[i];
    }

    // Shifted coordinates: origin = weighted grand mean of each column, summed
    // in double-double relative to the first cell's origin. Cell means relative
    // to it are kept in double-double (xbd, ybd) for the estimates, and rounded
    // (xb_, yb_) for standard errors and sums of squares.
    ox_.resize(p_);
    xb_.resize(L, p_);
    yb_.resize(L);
    std::vector<std::vector<ddouble>> xbd(L, std::vector<ddouble>(p_));
    std::vector<ddouble> ybd(L);
    for (int j = 0; j <= p_; ++j) {
        const double base = s.cell_origin(cell_[0])[j];
        ddouble acc = 0.0;
        for (std::size_t i = 0; i < L; ++i)
            acc += s.cell_mean_from(cell_[i], j, base) * w_[i];
        const double origin = (ddouble(base) + acc / ddouble(wsum_)).value();
        for (std::size_t i = 0; i < L; ++i) {
            const ddouble v = s.cell_mean_from(cell_[i], j, origin);
            if (j < p_) xbd[i][j] = v, xb_(i, j) = v.value();
            else ybd[i] = v, yb_[i] = v.value();
        }
        if (j < p_) ox_[j] = origin; else oy_ = origin;
    }

    // Pooled within-cell factor over [x, y], in double-double.
    factor<ddouble> within(p_ + 1);
    std::vector<ddouble> row(p_ + 1);
    for (std::size_t i = 0; i < L; ++i) {
        const std::size_t c = cell_[i];
        const ddouble* d = s.cell_d(c);
        const ddouble* rb = s.cell_rbar(c);
        for (int r = 1; r < k; ++r) {
            if (d[r] == ddouble(0.0)) continue;
            for (int j = 1; j < k; ++j)
                row[j - 1] = j < r ? ddouble(0.0) : j == r ? ddouble(1.0) : rb[detail::rbar_index(k, r, j)];
            within.include(row, d[r], r - 1);
        }
    }
    within_ = Eigen::MatrixXd::Zero(p_ + 1, p_ + 1);
    std::vector<double> colnorm2(p_ + 1, 0.0);
    for (int i = 0; i <= p_; ++i)
        for (int j = i; j <= p_; ++j) {
            within_(i, j) = std::sqrt(within.d[i].value()) * within.r(i, j).value();
            colnorm2[j] += within_(i, j) * within_(i, j);
        }

    // Aliasing, in column order (AS 274's treatment of singularities, Miller
    // 1992): a covariate whose remaining weight d_j is below tolerance^2 of its
    // squared norm is aliased; its row is cleared and folded into the later
    // columns, so later estimates stay exact.
    alias_.assign(p_, false);
    alias_reason_.assign(p_, std::string());
    alias_delta_.assign(p_, Eigen::VectorXd());
    beta_ = Eigen::VectorXd::Constant(p_, nan);
    for (int j = 0; j < p_; ++j) {
        const double dj = within.d[j].value();
        if (colnorm2[j] > 0 && dj > alias_tolerance * alias_tolerance * colnorm2[j]) {
            kept_.push_back(j);
            continue;
        }
        alias_[j] = true;
        // Coefficients of this column on the kept columns before it.
        const int nk = static_cast<int>(kept_.size());
        Eigen::VectorXd delta(nk);
        for (int b = nk - 1; b >= 0; --b) {
            ddouble v = within.r(kept_[b], j);
            for (int c = b + 1; c < nk; ++c) v -= within.r(kept_[b], kept_[c]) * ddouble(delta[c]);
            delta[b] = v.value();
        }
        alias_delta_[j] = delta;
        std::string with;
        for (int b = 0; b < nk; ++b)
            if (std::fabs(delta[b]) > 0) with += ", " + names_[kept_[b] + 1];
        alias_reason_[j] = colnorm2[j] == 0.0
                               ? "aliased: " + names_[j + 1] + " does not vary within any level of " +
                                     names_[0]
                               : "aliased: " + names_[j + 1] +
                                     " is a linear combination of the grouping" + with;
        // Fold row j (its entries after column j) into the later rows.
        std::vector<ddouble> rest(p_ + 1, ddouble(0.0));
        for (int c = j + 1; c <= p_; ++c) rest[c] = within.r(j, c);
        const ddouble wj = within.d[j];
        within.d[j] = 0.0;
        for (int c = j + 1; c <= p_; ++c) within.at(j, c) = 0.0;
        if (wj.hi > 0) within.include(rest, wj, j + 1);
    }
    const int rank = static_cast<int>(kept_.size());
    r_.resize(rank, rank);
    qty_.resize(rank);
    for (int a = 0; a < rank; ++a) {
        const double sd = std::sqrt(within.d[kept_[a]].value());
        for (int b = 0; b < rank; ++b) r_(a, b) = sd * within.r(kept_[a], kept_[b]).value();
        qty_[a] = sd * within.r(kept_[a], p_).value();
    }
    sse_ = within.d[p_].value();
    // Slopes by back substitution on the unit triangle, in double-double.
    std::vector<ddouble> betad(p_, ddouble(0.0));
    for (int a = rank - 1; a >= 0; --a) {
        ddouble v = within.r(kept_[a], p_);
        for (int b = a + 1; b < rank; ++b) v -= within.r(kept_[a], kept_[b]) * betad[kept_[b]];
        betad[kept_[a]] = v;
        beta_[kept_[a]] = v.value();
    }
    betad_ = betad;
    mud_.assign(L, ddouble(0.0));
    mu_.resize(L);
    for (std::size_t i = 0; i < L; ++i) {
        ddouble v = ybd[i];
        for (int a = 0; a < rank; ++a) v -= xbd[i][kept_[a]] * betad[kept_[a]];
        mud_[i] = v;
        mu_[i] = v.value();
    }

    // Grouping sums of squares as sums of non-negative increments (AS 75 keeps
    // the residual sum of squares current as each row is included).
    {
        factor<double> between(2);
        std::vector<double> r2(2);
        for (std::size_t i = 0; i < L; ++i) {
            r2 = {1.0, yb_[i]};
            ss_group_seq_ += between.include(r2, w_[i]);
        }
    }
    {
        factor<double> adj(rank + 2);  // [1, kept x, y]
        std::vector<double> r3(rank + 2);
        for (int a = 0; a <= rank; ++a) {  // the within factor reduced to kept columns
            r3[0] = 0.0;
            for (int b = 0; b < rank; ++b) r3[b + 1] = a < rank ? r_(a, b) : 0.0;
            r3[rank + 1] = a < rank ? qty_[a] : std::sqrt(sse_);
            adj.include(r3, 1.0, 1);
        }
        for (std::size_t i = 0; i < L; ++i) {
            r3[0] = 1.0;
            for (int b = 0; b < rank; ++b) r3[b + 1] = xb_(i, kept_[b]);
            r3[rank + 1] = yb_[i];
            ss_group_adj_ += adj.include(r3, w_[i]);
        }
    }
}

double fit::level_sd(std::size_t i) const {
    const std::size_t c = cell_[i];
    const std::int64_t n = s_->cell_rows(c);
    if (n < 2) return nan;
    const int k = p_ + 2;
    const ddouble* d = s_->cell_d(c);
    const ddouble* rb = s_->cell_rbar(c);
    double ss = 0.0;  // the response column of R below its first row
    for (int r = 1; r < k; ++r) {
        const double v = r == k - 1 ? 1.0 : rb[detail::rbar_index(k, r, k - 1)].value();
        ss += d[r].value() * v * v;
    }
    // Weighted SD: sum w (y - ybar_w)^2 / (n - 1) with n the row count.
    return std::sqrt(ss / double(n - 1));
}

Eigen::VectorXd fit::at_values() const {
    Eigen::VectorXd at = ox_;
    for (const auto& [name, v] : opt_.at) {
        int found = -1;
        for (int j = 0; j < p_; ++j)
            if (names_[j + 1] == name) found = j;
        if (found < 0) {
            std::vector<std::string> cov(names_.begin() + 1, names_.end());
            throw error("options: at names an unknown covariate '" + name + "' (covariates: " +
                        (cov.empty() ? std::string("none") : label_list(cov)) + ")");
        }
        at[found] = v;
    }
    return at;
}

double fit::sigma2() const {
    const double df = df_resid();
    return df > 0 ? sse_ / df : nan;
}

std::size_t fit::find_level(const std::string& label, const char* where) const {
    for (std::size_t i = 0; i < labels_.size(); ++i)
        if (labels_[i] == label) return i;
    throw_unknown_level(where, label, labels_);
}

Eigen::VectorXd fit::d_prime_a(const Eigen::VectorXd& a) const {
    Eigen::VectorXd u(kept_.size());
    for (std::size_t b = 0; b < kept_.size(); ++b) u[b] = xb_.col(kept_[b]).dot(a);
    return u;
}

double fit::g_quadratic(const Eigen::VectorXd& u) const {
    if (u.size() == 0) return 0.0;
    Eigen::VectorXd z = r_.transpose().triangularView<Eigen::Lower>().solve(u);
    return z.squaredNorm();
}

estimate fit::evaluate(const linear_function& f) const {
    estimate e{nan, nan, true};
    // Estimability: the function must not move along the null direction of any
    // aliased covariate (beta_j + 1, kept beta - delta_j, mu - gamma_j).
    for (int j = 0; j < p_; ++j) {
        if (!alias_[j]) continue;
        const Eigen::VectorXd& delta = alias_delta_[j];
        // Scale: the magnitudes that cancel in `along`, so that rounding in an
        // exact collinearity is not mistaken for a real dependence.
        Eigen::VectorXd gamma = xb_.col(j);
        Eigen::VectorXd gamma_mag = xb_.col(j).cwiseAbs();
        double scale = std::fabs(f.g[j]);
        double along = f.g[j];
        // delta covers the covariates kept before j only.
        for (Eigen::Index b = 0; b < delta.size(); ++b) {
            gamma -= xb_.col(kept_[b]) * delta[b];
            gamma_mag += xb_.col(kept_[b]).cwiseAbs() * std::fabs(delta[b]);
            along -= f.g[kept_[b]] * delta[b];
            scale += std::fabs(f.g[kept_[b]] * delta[b]);
        }
        along -= f.a.dot(gamma);
        scale += f.a.cwiseAbs().dot(gamma_mag);
        if (std::fabs(along) > 1e-9 * scale + 1e-300) {
            e.estimable = false;
            return e;
        }
    }
    // The value in double-double: large intercept offsets cancel exactly.
    // One pass over the levels that the function touches (most report rows
    // touch two: O(levels) to find them, O(p) each), for the value, D'a and
    // sum a_i^2 / W_i.
    ddouble v = f.c;
    Eigen::VectorXd u = Eigen::VectorXd::Zero(static_cast<Eigen::Index>(kept_.size()));
    double aw = 0.0;
    for (Eigen::Index i = 0; i < f.a.size(); ++i) {
        const double ai = f.a[i];
        if (ai == 0.0) continue;
        v += mud_[i] * ai;
        aw += ai * ai / w_[i];
        for (std::size_t b = 0; b < kept_.size(); ++b) u[b] += xb_(i, kept_[b]) * ai;
    }
    for (std::size_t b = 0; b < kept_.size(); ++b) {
        v += betad_[kept_[b]] * f.g[kept_[b]];
        u[b] -= f.g[kept_[b]];
    }
    e.value = v.value();
    const double s2 = sigma2();
    if (!std::isnan(s2)) e.std_error = std::sqrt(s2 * (aw + g_quadratic(u)));
    return e;
}

estimate fit::level_mean_at(std::size_t i, const Eigen::VectorXd& at) const {
    for (int j = 0; j < p_; ++j)
        if (alias_[j]) {  // the general path decides estimability
            Eigen::VectorXd k = Eigen::VectorXd::Zero(levels());
            k[i] = 1.0;
            return evaluate(level_combination(k, at));
        }
    ddouble v = mud_[i] + ddouble(oy_);
    Eigen::VectorXd u(kept_.size());
    for (std::size_t b = 0; b < kept_.size(); ++b) {
        const int j = kept_[b];
        const double g = at[j] - ox_[j];
        v += betad_[j] * g;
        u[b] = xb_(i, j) - g;
    }
    estimate e{v.value(), nan, true};
    const double s2 = sigma2();
    if (!std::isnan(s2)) e.std_error = std::sqrt(s2 * (1.0 / w_[i] + g_quadratic(u)));
    return e;
}

std::vector<estimate> fit::deviations_from(const Eigen::VectorXd& w) const {
    const std::size_t L = levels();
    std::vector<estimate> out;
    out.reserve(L);
    const Eigen::VectorXd zero = Eigen::VectorXd::Zero(p_);
    if (std::find(alias_.begin(), alias_.end(), true) != alias_.end()) {
        for (std::size_t i = 0; i < L; ++i) {
            Eigen::VectorXd k = -w;
            k[i] += 1.0;
            out.push_back(evaluate(level_combination(k, zero)));
        }
        return out;
    }
    // a = e_i - w: sum_j a_j mu_j = mu_i - m with m = sum_j w_j mu_j (double-
    // double, once); D'a = xbar_i - D'w; sum_j a_j^2 / W_j = q + (1 - 2 w_i) / W_i
    // with q = sum_j w_j^2 / W_j.
    ddouble m = 0.0;
    double q = 0.0;
    for (std::size_t j = 0; j < L; ++j) {
        if (w[j] != 0.0) m += mud_[j] * w[j];
        q += w[j] * w[j] / w_[j];
    }
    const Eigen::VectorXd dw = d_prime_a(w);
    const double s2 = sigma2();
    Eigen::VectorXd u(kept_.size());
    for (std::size_t i = 0; i < L; ++i) {
        for (std::size_t b = 0; b < kept_.size(); ++b) u[b] = xb_(i, kept_[b]) - dw[b];
        estimate e{(mud_[i] - m).value(), nan, true};
        if (!std::isnan(s2))
            e.std_error = std::sqrt(s2 * (std::max(0.0, q + (1.0 - 2.0 * w[i]) / w_[i]) + g_quadratic(u)));
        out.push_back(e);
    }
    return out;
}

Eigen::VectorXd fit::covariance_loading(const linear_function& f) const {
    Eigen::VectorXd u = d_prime_a(f.a);
    for (std::size_t b = 0; b < kept_.size(); ++b) u[b] -= f.g[kept_[b]];
    if (kept_.empty()) return u;
    return r_.transpose().triangularView<Eigen::Lower>().solve(u);
}

double fit::scaled_covariance(const linear_function& f1, const linear_function& f2) const {
    Eigen::VectorXd u1 = d_prime_a(f1.a), u2 = d_prime_a(f2.a);
    for (std::size_t b = 0; b < kept_.size(); ++b) {
        u1[b] -= f1.g[kept_[b]];
        u2[b] -= f2.g[kept_[b]];
    }
    double v = f1.a.cwiseProduct(f2.a).cwiseQuotient(w_).sum();
    if (!kept_.empty()) {
        Eigen::VectorXd z1 = r_.transpose().triangularView<Eigen::Lower>().solve(u1);
        Eigen::VectorXd z2 = r_.transpose().triangularView<Eigen::Lower>().solve(u2);
        v += z1.dot(z2);
    }
    return v;
}

linear_function fit::level_combination(const Eigen::VectorXd& k, const Eigen::VectorXd& at) const {
    linear_function f;
    f.a = k;
    const double total = k.sum();
    f.g = total * (at - ox_);
    f.c = total * oy_;
    return f;
}

linear_function fit::slope_function(int j) const {
    linear_function f;
    f.a = Eigen::VectorXd::Zero(levels());
    f.g = Eigen::VectorXd::Zero(p_);
    f.g[j] = 1.0;
    return f;
}

double fit::ss_covariate_sequential(int j) const {
    for (std::size_t b = 0; b < kept_.size(); ++b)
        if (kept_[b] == j) return qty_[b] * qty_[b];
    return 0.0;
}

double fit::ss_covariate_partial(int j) const {
    for (std::size_t b = 0; b < kept_.size(); ++b)
        if (kept_[b] == j) {
            Eigen::VectorXd e = Eigen::VectorXd::Zero(kept_.size());
            e[b] = 1.0;
            return beta_[j] * beta_[j] / g_quadratic(e);
        }
    return 0.0;
}

double fit::ss_model() const {
    return ss_group_seq_ + qty_.squaredNorm();
}

double fit::ss_total() const { return ss_model() + sse_; }

double fit::condition_number() const {
    for (int j = 0; j < p_; ++j)
        if (alias_[j]) return nan;
    const Eigen::Index L = static_cast<Eigen::Index>(levels());
    if (p_ == 0) return 1.0;
    // Raw covariate columns: between part sqrt(W) * xbar (raw) and within part.
    Eigen::MatrixXd b(L, p_);
    Eigen::MatrixXd wx = within_.topLeftCorner(p_, p_);
    for (int j = 0; j < p_; ++j) {
        for (Eigen::Index i = 0; i < L; ++i) b(i, j) = std::sqrt(w_[i]) * (xb_(i, j) + ox_[j]);
        const double nrm = std::sqrt(b.col(j).squaredNorm() + wx.col(j).squaredNorm());
        if (nrm == 0.0) return nan;
        b.col(j) /= nrm;
        wx.col(j) /= nrm;
    }
    // The indicator columns are orthonormal after scaling; in the basis of b's
    // column space the matrix reduces to [[I, R_b], [0, Wx]], and every other
    // singular value is exactly 1.
    Eigen::HouseholderQR<Eigen::MatrixXd> qr(b);
    const Eigen::Index mm = std::min<Eigen::Index>(L, p_);
    Eigen::MatrixXd rb = qr.matrixQR().topRows(mm).triangularView<Eigen::Upper>();
    Eigen::MatrixXd n = Eigen::MatrixXd::Zero(mm + p_, mm + p_);
    n.topLeftCorner(mm, mm).setIdentity();
    n.topRightCorner(mm, p_) = rb;
    n.bottomRightCorner(p_, p_) = wx;
    Eigen::JacobiSVD<Eigen::MatrixXd> svd(n);
    double smax = svd.singularValues().maxCoeff(), smin = svd.singularValues().minCoeff();
    if (L > mm) smax = std::max(smax, 1.0), smin = std::min(smin, 1.0);
    return smin > 0 ? smax / smin : nan;
}

}  // namespace groupfit
