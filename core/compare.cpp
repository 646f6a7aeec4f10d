#include "compare.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numeric>

#include "dist.hpp"
#include "error.hpp"
#include "multcomp.hpp"

namespace groupfit {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();

value num(double v) { return std::isnan(v) ? value{} : value{v}; }
value text(std::string s) { return value{std::move(s)}; }

std::string weight_text(double w) { return short_real(w); }

/// One comparison or contrast: its linear function and what came of it.
struct item {
    Eigen::VectorXd k;
    double est = nan, se = nan, t = nan, p = nan;
    std::string note;
    bool ok() const { return !std::isnan(se) && se > 0; }
};

void evaluate_item(const mean_family& f, item& it) {
    const estimate e = f.combine(it.k);
    if (!e.estimable) {
        it.note = "not estimable: " + f.not_estimable_reason();
        return;
    }
    it.est = e.value;
    it.se = e.std_error;
    if (std::isnan(e.std_error)) it.note = "no residual degrees of freedom: no standard error";
    else if (!(e.std_error > 0)) it.note = "zero standard error (exact fit): no test";
    else it.t = e.value / e.std_error;
}

/// The levels of a one-factor model at the covariate values of at=.
class level_family final : public mean_family {
public:
    explicit level_family(const fit& f) : f_(f), at_(f.at_values()) {}
    std::size_t size() const override { return f_.levels(); }
    std::string label(std::size_t i) const override { return f_.level_label(i); }
    std::size_t find(const std::string& label, const char* option) const override {
        return f_.find_level(label, option);
    }
    estimate combine(const Eigen::VectorXd& k) const override {
        return f_.evaluate(f_.level_combination(k, at_));
    }
    double scaled_covariance(const Eigen::VectorXd& k1, const Eigen::VectorXd& k2) const override {
        return f_.scaled_covariance(f_.level_combination(k1, at_), f_.level_combination(k2, at_));
    }
    double df() const override { return f_.df_resid(); }
    double sigma2() const override { return f_.sigma2(); }
    std::string at_text() const override {
        std::string a;
        for (int j = 0; j < f_.covariates(); ++j)
            a += (j ? ", " : "") + f_.covariate_name(j) + "=" + shortest_real(at_[j]);
        return a;
    }
    std::string not_estimable_reason() const override { return "an aliased covariate confounds it"; }
    bool many_to_one_lowrank(std::size_t control, const std::vector<std::size_t>& treated,
                             dist::lowrank_covariance& out) const override {
        const std::size_t m = treated.size();
        const int kept = static_cast<int>(f_.covariance_loading(f_.level_combination(
                                              Eigen::VectorXd::Zero(f_.levels()), at_)).size());
        out.a.resize(m);
        out.V.resize(m, 1 + kept);
        for (std::size_t i = 0; i < m; ++i) {
            Eigen::VectorXd k = Eigen::VectorXd::Zero(f_.levels());
            k[treated[i]] = 1.0;
            k[control] = -1.0;
            out.a[i] = 1.0 / f_.level_weight(treated[i]);
            out.V(i, 0) = 1.0 / std::sqrt(f_.level_weight(control));
            if (kept > 0) out.V.row(i).tail(kept) = f_.covariance_loading(f_.level_combination(k, at_)).transpose();
        }
        return true;
    }

private:
    const fit& f_;
    Eigen::VectorXd at_;
};

}  // namespace

namespace detail {

/// Indices of the non-NaN p-values, in ascending order of p (ties by position).
static std::vector<std::size_t> ascending(const std::vector<double>& p) {
    std::vector<std::size_t> idx;
    for (std::size_t i = 0; i < p.size(); ++i)
        if (!std::isnan(p[i])) idx.push_back(i);
    std::stable_sort(idx.begin(), idx.end(), [&](auto a, auto b) { return p[a] < p[b]; });
    return idx;
}

std::vector<double> holm(const std::vector<double>& p) {
    const std::vector<std::size_t> idx = ascending(p);
    std::vector<double> out(p.size(), nan);
    const double m = double(idx.size());
    double running = 0.0;
    for (std::size_t r = 0; r < idx.size(); ++r) {
        running = std::max(running, std::min(1.0, (m - double(r)) * p[idx[r]]));
        out[idx[r]] = running;
    }
    return out;
}

std::vector<double> benjamini_hochberg(const std::vector<double>& p) {
    const std::vector<std::size_t> idx = ascending(p);
    std::vector<double> out(p.size(), nan);
    const double m = double(idx.size());
    double running = 1.0;
    for (std::size_t r = idx.size(); r-- > 0;) {
        running = std::min(running, std::min(1.0, m / double(r + 1) * p[idx[r]]));
        out[idx[r]] = running;
    }
    return out;
}

}  // namespace detail

const std::vector<std::string>& pairs_columns() {
    static const std::vector<std::string> c = {
        "level_a", "level_b", "within", "estimate", "std_error", "t_stat", "df", "p_value", "p_adjusted",
        "ci_lower", "ci_upper", "method", "interval", "note"};
    return c;
}

const std::vector<std::string>& contrast_columns() {
    static const std::vector<std::string> c = {
        "contrast", "kind", "estimate", "std_error", "t_stat", "df", "df_denom", "f_stat",
        "p_value", "ci_lower", "ci_upper", "note"};
    return c;
}

table pairs_report(const fit& f) {
    table t{pairs_columns(), {}};
    pairs_rows(level_family(f), f.opts(), std::string(), t);
    return t;
}

table contrast_report(const fit& f, std::string_view weights) {
    return contrast_report(level_family(f), f.opts(), weights);
}

void pairs_rows(const mean_family& f, const options& o, const std::string& within, table& t) {
    const std::size_t L = f.size();
    if (L < 2) throw error("comparisons need at least two levels; the model has one");

    std::vector<std::pair<std::size_t, std::size_t>> pairs;
    if (o.has_vs) {
        const std::size_t c = f.find(o.vs, "options: vs");
        for (std::size_t i = 0; i < L; ++i)
            if (i != c) pairs.emplace_back(i, c);
    } else {
        for (std::size_t a = 0; a < L; ++a)
            for (std::size_t b = a + 1; b < L; ++b) pairs.emplace_back(a, b);
    }
    std::vector<item> items(pairs.size());
    for (std::size_t r = 0; r < pairs.size(); ++r) {
        Eigen::VectorXd k = Eigen::VectorXd::Zero(L);
        k[pairs[r].first] = 1.0;
        k[pairs[r].second] = -1.0;
        items[r].k = std::move(k);
        evaluate_item(f, items[r]);
    }

    const double df = f.df();
    const double alpha = 1.0 - o.conf;
    const side_kind side = o.side;
    const bool two = side == side_kind::two_sided;
    // Raw p-values in the direction asked for.
    std::vector<double> raw(items.size(), nan);
    std::size_t m = 0;
    for (std::size_t r = 0; r < items.size(); ++r) {
        if (!items[r].ok()) continue;
        ++m;
        const double t = items[r].t;
        if (two) raw[r] = dist::t_two_sided_p(t, df);
        else {
            const double upper = 0.5 * dist::t_two_sided_p(std::fabs(t), df);  // P(T > |t|)
            const bool same = (side == side_kind::greater) == (t > 0);
            raw[r] = same ? upper : 1.0 - upper;
        }
    }
    const double md = double(m);

    std::vector<double> adj(items.size(), nan);
    double crit = nan;  // half-width multiplier of the interval, in standard errors
    std::string interval = "simultaneous";
    std::string dunnett_method;
    auto t_crit = [&](double level) {  // two-sided or one-sided t quantile at a confidence level
        return dist::t_quantile(two ? 1.0 - (1.0 - level) / 2.0 : level, df);
    };
    switch (o.adjust) {
    case adjust_kind::none:
        adj = raw;
        crit = t_crit(o.conf);
        interval = "per comparison";
        break;
    case adjust_kind::bonferroni:
        for (std::size_t r = 0; r < raw.size(); ++r)  // NaN (not computable) stays NaN
            adj[r] = std::isnan(raw[r]) ? raw[r] : std::min(1.0, md * raw[r]);
        crit = t_crit(1.0 - alpha / md);
        break;
    case adjust_kind::sidak:
        for (std::size_t r = 0; r < raw.size(); ++r)
            adj[r] = -std::expm1(md * std::log1p(-raw[r]));
        crit = t_crit(std::pow(o.conf, 1.0 / md));
        break;
    case adjust_kind::holm:
        adj = detail::holm(raw);
        crit = t_crit(o.conf);
        interval = "per comparison; not simultaneous (step-down method)";
        break;
    case adjust_kind::bh:
        adj = detail::benjamini_hochberg(raw);
        crit = t_crit(o.conf);
        interval = "per comparison; not simultaneous (false discovery rate)";
        break;
    case adjust_kind::tukey:
        for (std::size_t r = 0; r < raw.size(); ++r)
            if (!std::isnan(raw[r]))
                adj[r] = dist::srange_upper_p(std::fabs(items[r].t) * std::sqrt(2.0), double(L), df);
        crit = dist::srange_quantile(o.conf, double(L), df) / std::sqrt(2.0);
        break;
    case adjust_kind::scheffe: {
        const double d1 = double(L - 1);
        for (std::size_t r = 0; r < raw.size(); ++r)
            if (!std::isnan(raw[r]))
                adj[r] = dist::f_upper_p(items[r].t * items[r].t / d1, d1, df);
        crit = std::sqrt(d1 * dist::f_quantile(o.conf, d1, df));
        break;
    }
    case adjust_kind::dunnett: {
        std::vector<std::size_t> live;
        for (std::size_t r = 0; r < items.size(); ++r)
            if (items[r].ok()) live.push_back(r);
        Eigen::MatrixXd corr(live.size(), live.size());
        std::vector<double> var(live.size());
        for (std::size_t a = 0; a < live.size(); ++a)
            var[a] = f.scaled_covariance(items[live[a]].k, items[live[a]].k);
        for (std::size_t a = 0; a < live.size(); ++a)
            for (std::size_t b = a; b < live.size(); ++b)
                corr(a, b) = corr(b, a) =
                    a == b ? 1.0
                           : f.scaled_covariance(items[live[a]].k, items[live[b]].k) /
                                 std::sqrt(var[a] * var[b]);
        const auto sides = two ? dist::dunnett_sides::two_sided : dist::dunnett_sides::one_sided;
        Eigen::VectorXd stat(live.size());
        for (std::size_t a = 0; a < live.size(); ++a) {
            const double t = items[live[a]].t;
            stat[a] = two ? std::fabs(t) : side == side_kind::greater ? t : -t;
        }
        if (!live.empty()) {
            // With a covariance of the form diag + low rank (the levels of a
            // model with covariates), the conditional integral of that form;
            // otherwise the general routines.
            std::vector<std::size_t> treated;
            for (std::size_t a = 0; a < live.size(); ++a) treated.push_back(pairs[live[a]].first);
            dist::lowrank_covariance lr;
            std::vector<dist::dunnett_result> res;
            dist::dunnett_result q{};
            // The general QMC works in m dimensions and is fast for few
            // comparisons; the low-rank integral pays off from about 8.
            if (live.size() >= 8 && f.many_to_one_lowrank(pairs[live[0]].second, treated, lr) &&
                lr.V.cols() > 1) {
                auto fam = dist::dunnett_lowrank(stat, lr, df, sides, o.conf);
                res = std::move(fam.adjusted_p);
                q = fam.quantile;
            } else {
                res = dist::dunnett_adjusted_p(stat, corr, df, sides);
                q = dist::dunnett_quantile(o.conf, corr, df, sides);
            }
            double err = 0.0;
            for (std::size_t a = 0; a < live.size(); ++a) {
                adj[live[a]] = std::min(1.0, std::max(0.0, res[a].value));
                err = std::max(err, res[a].error_bound);
            }
            crit = q.value;
            dunnett_method = std::string(res[0].method) + ", p error <= " + short_real(std::max(err, 1e-15), 2);
        }
        break;
    }
    }
    std::string method = adjust_name(o.adjust);
    if (!two) method += std::string(" (one-sided, ") + side_name(side) + ")";
    if (!dunnett_method.empty()) method += " [" + dunnett_method + "]";

    for (std::size_t r = 0; r < items.size(); ++r) {
        const item& it = items[r];
        double lo = nan, hi = nan;
        if (it.ok()) {
            lo = it.est - crit * it.se;
            hi = it.est + crit * it.se;
            if (side == side_kind::greater) hi = std::numeric_limits<double>::infinity();
            if (side == side_kind::less) lo = -std::numeric_limits<double>::infinity();
        }
        t.rows.push_back(make_row(text(f.label(pairs[r].first)), text(f.label(pairs[r].second)),
                                  within.empty() ? value{} : text(within), num(it.est), num(it.se),
                                  num(it.t), df > 0 ? num(df) : value{}, num(raw[r]), num(adj[r]),
                                  num(lo), num(hi), text(method), text(interval),
                                  it.note.empty() ? value{} : text(it.note)));
    }
}

table contrast_report(const mean_family& f, const options& o, std::string_view weights) {
    const std::size_t L = f.size();
    std::vector<item> items;
    std::vector<std::string> written;
    std::vector<bool> is_contrast;
    for (const std::string& spec : detail::split_list(weights, ';', false, "weights")) {
        if (spec.empty()) continue;
        Eigen::VectorXd k = Eigen::VectorXd::Zero(L);
        std::vector<bool> seen(L, false);
        std::string out;
        for (const std::string& term : detail::split_list(spec, ',', false, "weights")) {
            const auto eq = term.rfind('=');
            if (term.empty() || eq == std::string::npos)
                throw error("weights: '" + term + "' is not level=weight (for example "
                            "'a=1, b=-0.5, c=-0.5; a=1, d=-1')");
            auto lab = detail::split_list(std::string_view(term).substr(0, eq), '\0', true, "weights");
            const std::string label = lab.empty() ? std::string() : lab[0];
            const std::string wtext = detail::split_list(std::string_view(term).substr(eq + 1), '\0', true, "weights")[0];
            double w = 0;
            if (!parse_real(wtext, w))
                throw error("weights: the weight of '" + label + "' must be a number, not '" + wtext + "'");
            const std::size_t i = f.find(label, "weights: a contrast");
            if (seen[i]) throw error("weights: level '" + label + "' appears twice in one contrast");
            seen[i] = true;
            k[i] = w;
            if (w == 0.0) continue;
            if (!out.empty()) out += w < 0 ? " - " : " + ";
            else if (w < 0) out += "-";
            out += weight_text(std::fabs(w)) + "*" + label;
        }
        if (k.cwiseAbs().sum() == 0.0) throw error("weights: a contrast has only zero weights");
        item it;
        it.k = k;
        evaluate_item(f, it);
        if (it.note.rfind("not estimable", 0) == 0)
            throw error("weights: '" + out + "' is " + it.note);
        const bool contrast = std::fabs(k.sum()) <= 1e-12 * k.cwiseAbs().sum();
        items.push_back(it);
        written.push_back(out);
        is_contrast.push_back(contrast);
    }
    if (items.empty()) throw error("weights: no contrast given (for example 'a=1, b=-1')");

    const double df = f.df();
    const double q = dist::t_quantile(1.0 - (1.0 - o.conf) / 2.0, df);
    table t{contrast_columns(), {}};
    const std::string at = f.at_text();
    for (std::size_t r = 0; r < items.size(); ++r) {
        const item& it = items[r];
        std::string note = it.note;
        if (!is_contrast[r] && !at.empty())
            note += std::string(note.empty() ? "" : "; ") + "at " + at;
        t.rows.push_back(make_row(text(written[r]),
                                  text(is_contrast[r] ? "contrast" : "combination of means (weights do "
                                                                      "not sum to zero)"),
                                  num(it.est), num(it.se), num(it.t), df > 0 ? num(df) : value{}, value{},
                                  value{}, it.ok() ? num(dist::t_two_sided_p(it.t, df)) : value{},
                                  it.ok() ? num(it.est - q * it.se) : value{},
                                  it.ok() ? num(it.est + q * it.se) : value{},
                                  note.empty() ? value{} : text(note)));
    }
    // Joint F test that every contrast (or combination) is zero.
    const std::size_t n = items.size();
    Eigen::MatrixXd v(n, n);
    Eigen::VectorXd e(n);
    bool all_ok = true;
    for (std::size_t a = 0; a < n; ++a) {
        all_ok = all_ok && items[a].ok();
        e[a] = items[a].est;
        for (std::size_t b = a; b < n; ++b)
            v(a, b) = v(b, a) = f.scaled_covariance(items[a].k, items[b].k);
    }
    value fs, p, rk, note;
    if (all_ok) {
        Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(v);
        const double top = es.eigenvalues().cwiseAbs().maxCoeff();
        double quad = 0.0;
        int rank = 0;
        for (Eigen::Index i = 0; i < es.eigenvalues().size(); ++i) {
            const double lam = es.eigenvalues()[i];
            if (lam <= 1e-10 * top) continue;
            const double proj = es.eigenvectors().col(i).dot(e);
            quad += proj * proj / lam;
            ++rank;
        }
        const double fval = quad / (rank * f.sigma2());
        fs = num(fval);
        rk = num(double(rank));
        p = num(dist::f_upper_p(fval, rank, df));
        if (rank < static_cast<int>(n))
            note = text("the contrasts are linearly dependent: the test has " +
                        std::to_string(rank) + " degrees of freedom");
    } else {
        note = text("no test: a contrast has no standard error");
    }
    t.rows.push_back(make_row(text("joint: all " + std::to_string(n) + (n == 1 ? " row is zero" : " rows are zero")), text("joint F test"),
                              value{}, value{}, value{}, std::move(rk), df > 0 ? num(df) : value{},
                              std::move(fs), std::move(p), value{}, value{}, std::move(note)));
    return t;
}

}  // namespace groupfit
