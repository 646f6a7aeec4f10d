// groupfit core: studentized range and Dunnett distributions (see multcomp.hpp
// for the methods and their references).
#include "multcomp.hpp"

#include <algorithm>
#include <array>
#include <map>
#include <boost/math/distributions/students_t.hpp>
#include <boost/math/special_functions/erf.hpp>
#include <boost/math/quadrature/gauss_kronrod.hpp>
#include <boost/math/special_functions/gamma.hpp>
#include <boost/math/tools/toms748_solve.hpp>
#include <cmath>
#include <cstdint>
#include <limits>
#include <memory>
#include <random>
#include <string>
#include <utility>

#include "error.hpp"

namespace groupfit::dist {

namespace {
namespace bm = boost::math;
namespace bq = boost::math::quadrature;
// Errors become NaN results rather than exceptions (the project-wide policy of
// dist.cpp); promotion to long double is kept for accuracy.
using policy = bm::policies::policy<bm::policies::domain_error<bm::policies::ignore_error>,
                                    bm::policies::overflow_error<bm::policies::ignore_error>,
                                    bm::policies::evaluation_error<bm::policies::ignore_error>>;

constexpr double nan = std::numeric_limits<double>::quiet_NaN();
constexpr double inf = std::numeric_limits<double>::infinity();
constexpr double pi = 3.141592653589793238462643;
constexpr double ln_sqrt_2pi = 0.9189385332046727417803297;  // log(sqrt(2 pi))
constexpr double ln_2pi = 1.837877066409345483560659;         // log(2 pi)
constexpr double inv_sqrt2 = 0.7071067811865475244008444;

constexpr int max_k = 10000;
constexpr double min_df = 1.0;

// ---------------------------------------------------------------------------
// Normal helpers. Q(u) = 1 - Phi(u) = Phi(-u); Mills ratio M(u) = Q(u) / phi(u).
// ---------------------------------------------------------------------------

double norm_cdf(double x) { return 0.5 * std::erfc(-x * inv_sqrt2); }

/// log M(u) for any real u, to about 1e-16 absolute.
double log_mills(double u) {
    if (u < 0) {
        // Q(u) = Phi(|u|) >= 1/2.
        return std::log1p(-0.5 * std::erfc(-u * inv_sqrt2)) + 0.5 * u * u + ln_sqrt_2pi;
    }
    if (u < 5) return std::log(0.5 * std::erfc(u * inv_sqrt2)) + 0.5 * u * u + ln_sqrt_2pi;
    if (u < 50) {
        // u^2/2 cancels against log erfc; long double keeps the difference exact
        // to double precision.
        long double v = u;
        return static_cast<double>(std::log(0.5L * std::erfc(v * 0.70710678118654752440L)) +
                                   0.5L * v * v + 0.91893853320467274178L);
    }
    // Asymptotic series M(u) = (1/u) sum_j (-1)^j (2j-1)!! / u^{2j}; seven terms
    // leave an error below 2e-19 for u >= 50.
    double z = 1.0 / (u * u), term = 1.0, sum = 0.0;
    for (int j = 1; j <= 7; ++j) {
        term *= -(2.0 * j - 1.0) * z;
        sum += term;
    }
    return -std::log(u) + std::log1p(sum);
}

/// log(1 + t) - t without cancellation: for |t| < 0.1 through
/// log(1+t) = 2 atanh(s), s = t/(2+t), so log(1+t) - t = -t^2/(2+t) + 2 sum_{j>=1} s^(2j+1)/(2j+1).
double log1p_minus(double t) {
    if (std::fabs(t) >= 0.1) return std::log1p(t) - t;
    const double s = t / (2 + t), s2 = s * s;
    double term = s * s2, sum = 0;
    for (int j = 1; j <= 9; ++j) {  // |s| < 0.053: s^19 is below 1e-24
        sum += term / (2 * j + 1);
        term *= s2;
    }
    return -t * t / (2 + t) + 2 * sum;
}

/// log Phi(x) for any real x, to about 1e-16 relative.
double log_norm_cdf(double x) {
    if (x > 0) return std::log1p(-0.5 * std::erfc(x * inv_sqrt2));
    if (x > -30) return std::log(0.5 * std::erfc(-x * inv_sqrt2));
    return -0.5 * x * x - ln_sqrt_2pi + log_mills(-x);
}

// ---------------------------------------------------------------------------
// Quadrature helpers
// ---------------------------------------------------------------------------

struct integral {
    double value = 0;
    double error = 0;  // estimated absolute error
};

/// Globally adaptive Gauss-Kronrod (15-point Gauss inside the 31-point Kronrod
/// rule): the panel with the largest error estimate |K - G| is bisected until
/// the summed estimate is below tol times the integral (QUADPACK's QAG
/// strategy), or max_panels are in use.
template <class F>
integral gk(F f, const std::vector<double>& breaks, double tol = 1e-12, int max_panels = 200) {
    struct panel {
        double a, b, value, error;
    };
    auto rule = [&](double lo, double hi) {
        double e = 0;
        double v = bq::gauss_kronrod<double, 31>::integrate(f, lo, hi, 0, 0.0, &e);
        return panel{lo, hi, v, e * 0.5 * (hi - lo)};  // Boost's estimate is for [-1, 1]
    };
    integral r;
    std::vector<panel> panels;
    // One allocation per integral (Dunnett's inner integrals are evaluated by
    // the hundred): the loop below stops at max_panels, or at once when the
    // breaks already give more.
    panels.reserve(std::max<std::size_t>(breaks.size(), static_cast<std::size_t>(std::max(max_panels, 1))));
    for (std::size_t i = 0; i + 1 < breaks.size(); ++i)
        if (breaks[i + 1] > breaks[i]) panels.push_back(rule(breaks[i], breaks[i + 1]));
    if (panels.empty()) return r;
    for (;;) {
        double value = 0, error = 0;
        std::size_t worst = 0;
        for (std::size_t i = 0; i < panels.size(); ++i) {
            value += panels[i].value;
            error += panels[i].error;
            if (panels[i].error > panels[worst].error) worst = i;
        }
        r = {value, error};
        if (error <= tol * std::fabs(value) || static_cast<int>(panels.size()) >= max_panels) break;
        panel p = panels[worst];
        double mid = 0.5 * (p.a + p.b);
        panels[worst] = rule(p.a, mid);
        panels.push_back(rule(mid, p.b));
    }
    return r;
}
template <class F>
integral gk(F f, double a, double b, double tol = 1e-12, int max_panels = 200) {
    return gk(f, std::vector<double>{a, b}, tol, max_panels);
}

/// Maximum of a concave (or unimodal) function on [a, b] by golden section.
template <class F>
std::pair<double, double> golden_max(F f, double a, double b, int iterations = 60) {
    const double g = 0.6180339887498948482;
    double x1 = b - g * (b - a), x2 = a + g * (b - a);
    double f1 = f(x1), f2 = f(x2);
    for (int i = 0; i < iterations && b - a > 1e-9 * (1 + std::fabs(a) + std::fabs(b)); ++i) {
        if (f1 < f2) {
            a = x1;
            x1 = x2;
            f1 = f2;
            x2 = a + g * (b - a);
            f2 = f(x2);
        } else {
            b = x2;
            x2 = x1;
            f2 = f1;
            x1 = b - g * (b - a);
            f1 = f(x1);
        }
    }
    return f1 < f2 ? std::make_pair(x2, f2) : std::make_pair(x1, f1);
}

/// For f unimodal with f(mode) = top: a point on the `dir` side (+1 or -1) of
/// the mode beyond which f < top - drop (found by doubling steps, then refined
/// by bisection; the returned point is on the outer side, within 2^-bisections
/// of the last step).
template <class F>
double drop_point(F f, double mode, double top, double drop, double dir, double step = 1.0,
                  int bisections = 24) {
    double inner = mode, outer = mode + dir * step;
    for (int i = 0; i < 60 && f(outer) >= top - drop; ++i) {
        inner = outer;
        step *= 2;
        outer = mode + dir * step;
    }
    for (int i = 0; i < bisections; ++i) {
        double mid = 0.5 * (inner + outer);
        if (f(mid) >= top - drop) inner = mid; else outer = mid;
    }
    return outer;
}

// ---------------------------------------------------------------------------
// The density of U = sqrt(T), T ~ Gamma(df/2): 2 u^(df-1) e^(-u^2) / Gamma(df/2).
// S = sqrt(chi^2_df / df) = U sqrt(2 / df).
// ---------------------------------------------------------------------------

class chi_weight {
public:
    explicit chi_weight(double df) : df_(df) {
        const double a = df / 2;
        if (df >= 2) {
            ref_ = std::sqrt((df - 1) / 2);  // the mode
            log_ref_ = std::log(2 * ref_ * bm::gamma_p_derivative(a, ref_ * ref_, policy()));
        } else {
            ref_ = 1;
            log_ref_ = std::log(2 * bm::gamma_p_derivative(a, 1.0, policy()));
        }
    }
    /// log density at the reference point (the mode for df >= 2).
    double log_ref() const { return log_ref_; }
    /// log density(u) - log_ref(), computed without cancellation for large df.
    double rel(double u) const {
        if (df_ >= 2) {
            double d = u - ref_;
            if (u <= 0) return -inf;
            return (df_ - 1) * log1p_minus(d / ref_) - d * d;
        }
        double p = df_ == 1 ? 0.0 : (u > 0 ? (df_ - 1) * std::log(u) : -inf);
        return p - (u * u - 1);
    }
    /// The interval where rel(u) >= rel(mode) - drop.
    std::pair<double, double> range(double drop) const {
        auto f = [this](double u) { return rel(u); };
        if (df_ >= 2) {
            // rel(u) <= -(u - mode)^2, so the drop lies within sqrt(drop) of the mode.
            double lo = std::max(0.0, ref_ - std::sqrt(drop));
            if (rel(lo) < -drop) lo = drop_point(f, ref_, 0.0, drop, -1.0, ref_ - lo, 10);
            double hi = drop_point(f, ref_, 0.0, drop, +1.0, std::sqrt(drop), 10);
            return {lo, hi};
        }
        double mode = std::sqrt((df_ - 1) / 2);
        return {0.0, drop_point(f, mode, rel(mode), drop, +1.0, std::sqrt(drop), 10)};
    }
    /// The mode of the density.
    double mode() const { return std::sqrt(std::max(df_ - 1, 0.0) / 2); }

private:
    double df_, ref_, log_ref_;
};

/// int_lo^hi f(u) du for an integrand of the form density_U(u) x smooth, with
/// its bulk at mode +- 3 sd. When the interval starts at 0 and df is not an
/// integer, u^(df-1) is not smooth at 0: the piece [0, u_s] is integrated in
/// t with u = u_s t^m, which turns the power into t^(m df - 1) with
/// m df - 1 >= 4.
template <class F>
integral integrate_u(F f, double lo, double mode, double sd, double hi, double df, double tol) {
    integral head;
    double start = lo;
    if (lo == 0 && df != std::floor(df)) {
        const double us = std::min(mode > 0 ? 0.5 * mode : 0.5 * sd, 0.5 * hi);
        const int m = std::max(2, static_cast<int>(std::ceil(5 / df)));
        auto g = [&](double t) {
            const double tm1 = std::pow(t, m - 1);
            return f(us * tm1 * t) * us * m * tm1;
        };
        head = gk(g, 0.0, 1.0, tol);
        start = us;
    }
    std::vector<double> cuts{start};
    if (mode - 3 * sd > start) cuts.push_back(mode - 3 * sd);
    if (mode + 3 * sd > cuts.back() && mode + 3 * sd < hi) cuts.push_back(mode + 3 * sd);
    cuts.push_back(hi);
    integral body = gk(f, cuts, tol);
    return {head.value + body.value, head.error + body.error};
}

/// Tilted upper-tail integral: returns log of c^(-df/2) * int density(u) H(kappa u) du,
/// where log_h(x) = log H(x) and H(x) <= e^(log_h_bound).
template <class LogH>
std::pair<double, double> tilted_outer(double df, double c_minus_1, double kappa, LogH log_h,
                                       double log_h_bound) {
    chi_weight cw(df);
    const double drop = 55 + log_h_bound + std::log1p(std::fabs(kappa) * (std::sqrt(df) + 12));
    auto [lo, hi] = cw.range(drop);
    auto f = [&](double u) {
        double v = cw.rel(u) + log_h(kappa * u);
        return std::isfinite(v) ? std::exp(v) : 0.0;
    };
    integral r = integrate_u(f, lo, cw.mode(), 0.5, hi, df, 1e-10);
    double log_p = -(df / 2) * std::log1p(c_minus_1) + cw.log_ref() + std::log(r.value);
    return {log_p, r.value > 0 ? r.error / r.value : 0.0};
}

// ---------------------------------------------------------------------------
// The range of k standard normals: tail table of log G(w), G = e^{w^2/4}(1 - W(w)).
// ---------------------------------------------------------------------------

constexpr int cheb_degree = 20;
constexpr int cheb_points = cheb_degree + 1;

/// Sum_j c_j T_j(t) for j = 0..degree (Clenshaw's recurrence).
double clenshaw(const double* c, int degree, double t) {
    const double t2 = 2 * t;
    double b1 = 0, b2 = 0;
    for (int j = degree; j >= 1; --j) {
        double b0 = c[j] + t2 * b1 - b2;
        b2 = b1;
        b1 = b0;
    }
    return c[0] + t * b1 - b2;
}

/// Coefficients of the derivative (in t) of sum_j c_j T_j(t), degree n -> n-1.
template <std::size_t N>
std::array<double, N> cheb_derivative(const std::array<double, N>& c, int n) {
    std::array<double, N> d{};
    double next = 0, next2 = 0;  // d_{j+1}, d_{j+2}
    for (int j = n; j >= 1; --j) {
        double dj = next2 + 2 * j * c[j];  // d_{j-1}
        next2 = next;
        next = dj;
        d[j - 1] = dj;
    }
    d[0] *= 0.5;
    return d;
}

struct cheb_panel {
    double y0, y1;
    std::array<double, cheb_points> c, d1, d2;  // L(y) and its first two derivatives in y
    double t_of(double y) const { return (2 * y - y0 - y1) / (y1 - y0); }
};

class range_tail {
public:
    explicit range_tail(int k) : k_(k), n_(k - 1.0), log_k_(std::log(double(k))),
                                 log_n_(std::log(k - 1.0)) {
        // Mode of the density of the maximum, k phi Phi^(k-1): -x + n phi/Phi = 0.
        double a = -2, b = 10;
        for (int i = 0; i < 100; ++i) {
            double x = 0.5 * (a + b);
            double g = -x + n_ * std::exp(-0.5 * x * x - ln_sqrt_2pi - log_norm_cdf(x));
            (g > 0 ? a : b) = x;
        }
        x_max_ = 0.5 * (a + b);
        s0_ = 1 + 2 * std::max(x_max_, 0.0);
        build();
    }

    int k() const { return k_; }

    /// log G(w) for w >= 0 from the table.
    double log_g(double w) const {
        if (!(w > 0)) return 0.0;
        if (std::isinf(w)) return -inf;
        const double y = w / (w + s0_);
        const cheb_panel& p = panel_at(y);
        return clenshaw(p.c.data(), cheb_degree, p.t_of(y)) - std::log1p(w / s0_);
    }
    /// log G(w) and its first two derivatives in w, from the table.
    std::array<double, 3> log_g3(double w) const {
        w = std::max(w, 0.0);
        const double y = w / (w + s0_), sw = w + s0_;
        const cheb_panel& p = panel_at(y);
        const double t = p.t_of(y);
        const double l0 = clenshaw(p.c.data(), cheb_degree, t);
        const double l1 = clenshaw(p.d1.data(), cheb_degree - 1, t);
        const double l2 = clenshaw(p.d2.data(), cheb_degree - 2, t);
        const double y1 = s0_ / (sw * sw), y2 = -2 * s0_ / (sw * sw * sw);
        return {l0 - std::log1p(w / s0_), l1 * y1 - 1 / sw, l2 * y1 * y1 + l1 * y2 + 1 / (sw * sw)};
    }

    /// log G(w) by direct quadrature (used to build the table).
    double log_g_direct(double w) const {
        if (w <= 0) return 0.0;
        const double drop = 50;
        auto m = [&](double x) { return envelope(x, w); };
        double lo0 = std::min(x_max_, 0.5 * w) - 12, hi0 = std::max(x_max_, 0.5 * w) + 12;
        auto [mode, top] = golden_max(m, lo0, hi0);
        double lo = drop_point(m, mode, top, drop, -1.0);
        double hi = drop_point(m, mode, top, drop, +1.0);
        auto f = [&, top = top](double x) { return std::exp(log_h(x, w) - top); };
        integral r = gk(f, lo, hi, 1e-14, 400);
        return top + std::log(r.value);
    }

private:
    /// log of the integrand h_w(x) of G(w) = int h_w(x) dx,
    ///   h_w = e^{w^2/4} k phi(x) [Phi(x)^n - (Phi(x) - Phi(x-w))^n]
    ///       = k Phi(x)^(n-1) (P/r) e^{-(x-w/2)^2} M(w-x) / (2 pi),
    /// with r = Phi(x-w)/Phi(x) and P = 1 - (1-r)^n.
    double log_h(double x, double w) const {
        double lpx = log_norm_cdf(x);
        double log_r = std::min(log_norm_cdf(x - w) - lpx, 0.0);
        double log_p_over_r;
        if (log_r < -700) {
            log_p_over_r = log_n_;
        } else {
            double r = std::exp(log_r);
            log_p_over_r = std::log(-std::expm1(n_ * std::log1p(-r))) - log_r;
        }
        double t = x - 0.5 * w;
        return log_k_ + (n_ - 1) * lpx + log_p_over_r - ln_2pi - t * t + log_mills(w - x);
    }
    /// A concave envelope of log h_w: h_w lies between (1 - 1/e) e^m and e^m with
    /// m = min(log of e^{w^2/4} k phi Phi^n, log of k n Phi^(n-1) e^{-(x-w/2)^2} M(w-x)/(2 pi)).
    double envelope(double x, double w) const {
        double lpx = log_norm_cdf(x);
        double t = x - 0.5 * w;
        double a = 0.25 * w * w + log_k_ - 0.5 * x * x - ln_sqrt_2pi + n_ * lpx;
        double b = log_k_ + log_n_ + (n_ - 1) * lpx - ln_2pi - t * t + log_mills(w - x);
        return std::min(a, b);
    }

    // The table of L(y) = log G(w) + log(1 + w/s0), w = s0 y / (1 - y).
    double table_value(double y) const {
        double w = s0_ * y / (1 - y);
        return log_g_direct(w) + std::log1p(w / s0_);
    }
    void build() {
        constexpr int initial = 8;
        std::vector<std::pair<double, double>> todo;
        for (int i = initial - 1; i >= 0; --i) todo.emplace_back(double(i) / initial, double(i + 1) / initial);
        while (!todo.empty()) {
            auto [y0, y1] = todo.back();
            todo.pop_back();
            cheb_panel p{y0, y1, {}, {}, {}};
            std::array<double, cheb_points> f;
            double fmax = 0;
            for (int l = 0; l < cheb_points; ++l) {
                double th = pi * (l + 0.5) / cheb_points;
                double y = 0.5 * (y0 + y1) + 0.5 * (y1 - y0) * std::cos(th);
                f[l] = table_value(y);
                fmax = std::max(fmax, std::fabs(f[l]));
            }
            for (int j = 0; j < cheb_points; ++j) {
                double s = 0;
                for (int l = 0; l < cheb_points; ++l) s += f[l] * std::cos(pi * j * (l + 0.5) / cheb_points);
                p.c[j] = (j == 0 ? 1.0 : 2.0) * s / cheb_points;
            }
            const double scale = 2 / (y1 - y0);
            p.d1 = cheb_derivative(p.c, cheb_degree);
            p.d2 = cheb_derivative(p.d1, cheb_degree - 1);
            for (int j = 0; j < cheb_points; ++j) {
                p.d1[j] *= scale;
                p.d2[j] *= scale * scale;
            }
            double tail = std::max(std::fabs(p.c[cheb_degree]), std::fabs(p.c[cheb_degree - 1]));
            if (tail > 5e-14 * std::max(1.0, fmax) && y1 - y0 > 1e-6) {
                double mid = 0.5 * (y0 + y1);
                todo.emplace_back(mid, y1);
                todo.emplace_back(y0, mid);
            } else {
                panels_.push_back(p);
            }
        }
        // Panels were produced in increasing order of y.
        for (const auto& p : panels_) breaks_.push_back(p.y0);
    }

    const cheb_panel& panel_at(double y) const {
        auto it = std::upper_bound(breaks_.begin(), breaks_.end(), y);
        std::size_t i = std::min<std::size_t>(it - breaks_.begin(), panels_.size());
        return panels_[i == 0 ? 0 : i - 1];
    }

    int k_;
    double n_, log_k_, log_n_, x_max_ = 0, s0_ = 1;
    std::vector<cheb_panel> panels_;
    std::vector<double> breaks_;
};

/// The tail table for k, from a small per-thread cache of the most recent ones.
const range_tail& tail_for(int k) {
    thread_local std::vector<std::shared_ptr<const range_tail>> cache;
    for (std::size_t i = 0; i < cache.size(); ++i) {
        if (cache[i]->k() == k) {
            std::rotate(cache.begin(), cache.begin() + i, cache.begin() + i + 1);
            return *cache.front();
        }
    }
    if (cache.size() >= 8) cache.pop_back();
    cache.insert(cache.begin(), std::make_shared<const range_tail>(k));
    return *cache.front();
}

bool valid_k(double k) { return k >= 2 && k <= max_k && k == std::floor(k); }
bool valid_df(double df) { return df >= min_df; }  // +inf allowed, NaN rejected

/// log P(Q > q) for valid k, df and q > 0 finite:
///   P(Q > q) = c^(-df/2) int density_U(u) G(kappa u) du   (see multcomp.hpp).
/// The integrand exp(psi(u)), psi = log density + log G(kappa u), is unimodal:
/// its mode is found by safeguarded Newton steps (derivatives of log G from
/// the table), the interval is where psi is within 40 of its maximum, and
/// adaptive Gauss-Kronrod integrates there.
double srange_log_upper(double q, int k, double df) {
    const range_tail& tab = tail_for(k);
    if (std::isinf(df)) return tab.log_g(q) - 0.25 * q * q;
    const double c_minus_1 = q * q / (2 * df);
    const double kappa = q * std::sqrt(2 / (df + 0.5 * q * q));
    const chi_weight cw(df);
    auto psi = [&](double u) { return cw.rel(u) + tab.log_g(kappa * u); };
    // psi' <= (df-1)/u - 2u/(1 + c_minus_1) (as (log G)' <= w/2), so the mode
    // is below sqrt((df-1)(1+c)/2).
    double a = 0, b = std::sqrt(std::max(df - 1, 0.0) * (1 + c_minus_1) / 2) + 1;
    auto slope = [&](double u, double* curv) {
        auto g = tab.log_g3(kappa * u);
        const double p = df == 1 ? 0.0 : (df - 1) / u;  // derivative of (df-1) log u
        if (curv) *curv = (df == 1 ? 0.0 : -p / u) - 2 + kappa * kappa * g[2];
        return p - 2 * u + kappa * g[1];
    };
    double u = std::clamp(std::sqrt(std::max(df - 1, 0.0) / 2), 0.25 * b, 0.75 * b);
    double curv = -1;
    bool boundary = false;
    if (df == 1 && slope(1e-300, nullptr) <= 0) {
        u = 0;  // decreasing from 0: mode at the boundary
        boundary = true;
        slope(1e-300, &curv);
    } else {
        for (int i = 0; i < 60; ++i) {
            double d = slope(u, &curv);
            (d > 0 ? a : b) = u;
            double next = curv < 0 ? u - d / curv : 0.5 * (a + b);
            if (!(next > a && next < b)) next = 0.5 * (a + b);
            bool done = std::fabs(next - u) <= 1e-10 * (1 + u) || b - a <= 1e-12 * (1 + u);
            u = next;
            if (done) break;
        }
        slope(u, &curv);
    }
    const double top = psi(u > 0 ? u : 1e-300);
    // Scale from the curvature at the mode, at most 1: for large q the tilt
    // cancels the density where the range tail is near 1, leaving a flat top
    // (kappa -> 2); the interval search below extends as far as needed.
    const double sd = std::min(1.0, 1 / std::sqrt(std::max(-curv, 1e-12)));
    constexpr double drop = 40;  // e^-40 ~ 4e-18
    double lo = 0;
    if (!boundary) {
        double step = 9 * sd;
        while (u - step > 0 && psi(u - step) > top - drop) step *= 1.6;
        lo = std::max(0.0, u - step);
    }
    double step = 9 * sd;
    while (psi(u + step) > top - drop) step *= 1.6;
    const double hi = u + step;
    auto f = [&](double x) {
        double v = psi(x) - top;
        return v > -745 ? std::exp(v) : 0.0;
    };
    integral r = integrate_u(f, lo, u, sd, hi, df, 1e-10);
    return -(df / 2) * std::log1p(c_minus_1) + cw.log_ref() + top + std::log(r.value);
}

/// Solve for x in a monotone problem with TOMS 748 after bracketing; f is
/// decreasing in x when `decreasing`.
template <class F>
double solve_monotone(F f, double lo, double hi, bool decreasing, double lo_limit, double hi_limit,
                      int bits = 50) {
    // Expand the bracket until f changes sign: f(lo) and f(hi) on opposite sides.
    auto sgn = [&](double v) { return decreasing ? -v : v; };  // increasing view
    double flo = sgn(f(lo)), fhi = sgn(f(hi));
    for (int i = 0; i < 200 && flo > 0; ++i) {
        hi = lo;
        fhi = flo;
        lo = std::max(lo_limit, lo - 2 * (hi_limit > lo ? std::max(1.0, std::fabs(lo)) : 1.0));
        if (lo_limit == 0 && lo <= 0) lo = hi / 4;
        flo = sgn(f(lo));
    }
    for (int i = 0; i < 200 && fhi < 0; ++i) {
        lo = hi;
        flo = fhi;
        hi = std::min(hi_limit, 2 * hi + 1);
        fhi = sgn(f(hi));
    }
    if (!(flo <= 0 && fhi >= 0)) return nan;
    if (flo == 0) return lo;
    if (fhi == 0) return hi;
    std::uintmax_t iterations = 200;
    auto g = [&](double x) { return sgn(f(x)); };
    auto r = bm::tools::toms748_solve(g, lo, hi, flo, fhi, bm::tools::eps_tolerance<double>(bits),
                                      iterations, policy());
    return 0.5 * (r.first + r.second);
}

}  // namespace

// ---------------------------------------------------------------------------
// Studentized range: public functions
// ---------------------------------------------------------------------------

double srange_upper_p(double q, double k, double df) {
    if (!valid_k(k) || !valid_df(df) || std::isnan(q)) return nan;
    if (q <= 0) return 1.0;
    if (std::isinf(q)) return 0.0;
    return std::min(1.0, std::exp(srange_log_upper(q, static_cast<int>(k), df)));
}

double srange_cdf(double q, double k, double df) {
    if (!valid_k(k) || !valid_df(df) || std::isnan(q)) return nan;
    if (q <= 0) return 0.0;
    if (std::isinf(q)) return 1.0;
    return std::max(0.0, -std::expm1(srange_log_upper(q, static_cast<int>(k), df)));
}

double srange_quantile(double p, double k, double df) {
    if (!valid_k(k) || !valid_df(df) || !(p >= 0 && p <= 1)) return nan;
    if (p == 0) return 0.0;
    if (p == 1) return inf;
    const int ki = static_cast<int>(k);
    if (p >= 0.5) {
        const double target = std::log1p(-p);
        auto f = [&](double q) { return srange_log_upper(q, ki, df) - target; };
        return solve_monotone(f, 1.0, 4.0, true, 0.0, 1e300);
    }
    auto f = [&](double q) { return -std::expm1(std::min(0.0, srange_log_upper(q, ki, df))) - p; };
    return solve_monotone(f, 1.0, 4.0, false, 0.0, 1e300);
}

// ---------------------------------------------------------------------------
// Dunnett: product form
// ---------------------------------------------------------------------------

namespace {

const char* const method_product = "product-form integral";
const char* const method_qmc = "Genz-Bretz randomized QMC";

class dunnett_product {
public:
    dunnett_product(const Eigen::VectorXd& lambda, bool two_sided) : two_sided_(two_sided) {
        if (lambda.size() == 0) throw groupfit::error("dunnett: there must be at least one comparison");
        for (Eigen::Index i = 0; i < lambda.size(); ++i) {
            double l = lambda[i];
            if (!(std::fabs(l) < 1))
                throw groupfit::error("dunnett: every lambda must be below 1 in absolute value");
            // Equal factors (balanced designs) are evaluated once, with a multiplicity.
            auto it = std::find(lam_.begin(), lam_.end(), l);
            if (it != lam_.end()) {
                ++mult_[it - lam_.begin()];
                continue;
            }
            lam_.push_back(l);
            sig_.push_back(std::sqrt((1 - l) * (1 + l)));
            mult_.push_back(1);
            reach_ = std::max(reach_, std::fabs(l));
        }
        m_ = static_cast<std::size_t>(lambda.size());
        cuts_.reserve(3 + 2 * lam_.size());
        pts_.reserve(3 + 2 * lam_.size());
    }
    std::size_t size() const { return m_; }

    /// log of H(x) = P(some comparison beyond x | S = 1), tilted by e^{x^2/2}
    /// when x > 0 (returns log H(x) + x^2/2); plain log H(x) when x <= 0.
    /// rel_err receives the relative quadrature error estimate.
    ///
    /// With cache(true), values come from Chebyshev interpolants of this
    /// smooth function on intervals of length 1 (breakpoint at 0, where the
    /// tilt starts), built from 20 direct evaluations per interval on first
    /// use: every threshold of a set of adjusted p-values, and every step of a
    /// quantile search, then shares the inner integrals. The interpolation
    /// error (bounded by the last coefficients, about 1e-14 here) is added to
    /// rel_err.
    double log_tail(double x, double* rel_err = nullptr) const {
        if (!cache_on_ || !(std::fabs(x) < 64.0)) return log_tail_direct(x, rel_err);
        if (x <= 0 && two_sided_) {
            if (rel_err) *rel_err = 0;
            return 0.0;
        }
        const long cell = static_cast<long>(std::floor(x));
        auto it = cache_.find(cell);
        if (it == cache_.end()) it = cache_.emplace(cell, build_piece(double(cell))).first;
        const piece& pc = it->second;
        // Clenshaw on t in [-1, 1].
        const double t = 2.0 * (x - double(cell)) - 1.0;
        double b1 = 0, b2 = 0;
        for (int k = cheb_nodes - 1; k >= 1; --k) {
            const double b0 = 2 * t * b1 - b2 + pc.coef[k];
            b2 = b1;
            b1 = b0;
        }
        if (rel_err) *rel_err = pc.err;
        return t * b1 - b2 + pc.coef[0];
    }
    void cache(bool on) const { cache_on_ = on; }

private:
    static constexpr int cheb_nodes = 20;
    struct piece {
        std::array<double, cheb_nodes> coef;
        double err;
    };
    piece build_piece(double left) const {
        std::array<double, cheb_nodes> v{};
        double err = 0;
        for (int j = 0; j < cheb_nodes; ++j) {
            const double t = std::cos(M_PI * (j + 0.5) / cheb_nodes);
            double e = 0;
            // Nodes stay inside (left, left + 1): the tilt switch at 0 is never crossed.
            v[j] = log_tail_direct(left + 0.5 * (t + 1.0), &e);
            err = std::max(err, e);
        }
        piece pc{};
        for (int k = 0; k < cheb_nodes; ++k) {
            double sum = 0;
            for (int j = 0; j < cheb_nodes; ++j)
                sum += v[j] * std::cos(M_PI * k * (j + 0.5) / cheb_nodes);
            pc.coef[k] = (k == 0 ? 1.0 : 2.0) * sum / cheb_nodes;
        }
        // Truncation error: the size of the last coefficients (absolute error
        // of the log is the relative error of H).
        pc.err = err + std::fabs(pc.coef[cheb_nodes - 1]) + std::fabs(pc.coef[cheb_nodes - 2]);
        return pc;
    }
    mutable bool cache_on_ = false;
    mutable std::map<long, piece> cache_;
    mutable std::vector<double> cuts_, pts_;  // log_tail_direct's scratch

public:
    double log_tail_direct(double x, double* rel_err = nullptr) const {
        if (x <= 0 && two_sided_) {
            if (rel_err) *rel_err = 0;
            return 0.0;  // P(max |T| > x) = 1
        }
        const bool tilt = x > 0;
        // Given Y = y the tail mass of comparison i sits near y = +-lambda_i x with
        // sd sigma_i <= 1 under the phi(y) envelope: 9.5 beyond the outermost
        // centre leaves less than e^-45 of it.
        const double y_max = (tilt ? reach_ * x : 0.0) + 9.5;
        // Scratch kept between calls (this is called hundreds of times per
        // probability): no allocation after the first call.
        std::vector<double>& cuts = cuts_;
        std::vector<double>& pts = pts_;
        cuts.assign({-y_max, y_max, 0.0});
        if (tilt) {
            for (double l : lam_) {
                cuts.push_back(l * x);
                if (two_sided_) cuts.push_back(-l * x);
            }
        }
        std::sort(cuts.begin(), cuts.end());
        pts.clear();
        for (double c : cuts) {
            c = std::clamp(c, -y_max, y_max);
            if (pts.empty() || c - pts.back() > 0.25) pts.push_back(c);
        }
        pts.back() = y_max;
        auto f = [&](double y) { return integrand(y, x, tilt); };
        integral r = gk(f, pts, 1e-11, 300);
        if (rel_err) *rel_err = r.value > 0 ? r.error / r.value : 0.0;
        return std::log(r.value);
    }

    /// log P(max > c) (two-sided: |T_i|) with the relative error estimate.
    std::pair<double, double> log_upper(double c, double df) const {
        if (two_sided_ && c <= 0) return {0.0, 0.0};
        if (std::isinf(df)) {
            double e = 0;
            double v = log_tail(c, &e);
            return {c > 0 ? v - 0.5 * c * c : v, e};
        }
        double max_inner = 0;
        auto lh = [&](double x) {
            double e = 0;
            double v = log_tail(x, &e);
            max_inner = std::max(max_inner, e);
            return v;
        };
        const double log_bound = std::log(2.0 * size()) + 1;
        std::pair<double, double> r;
        if (c > 0) {
            r = tilted_outer(df, c * c / df, c * std::sqrt(2 / (df + c * c)), lh, log_bound);
        } else {
            // One-sided with c <= 0: no tilt, H >= 1/2.
            r = tilted_outer(df, 0.0, c * std::sqrt(2 / df), lh, 0.0);
        }
        r.second += max_inner;
        return r;
    }

private:
    double integrand(double y, double x, bool tilt) const {
        // e_i = P(comparison i beyond x | Y = y); complement C = 1 - prod(1 - e_i).
        double log_inside = 0, e_sum = 0;
        for (std::size_t i = 0; i < lam_.size(); ++i) {
            const double l = lam_[i], s = sig_[i], mult = mult_[i];
            const double a = (x - l * y) / s;  // upper standardized limit
            double ep = 0.5 * std::erfc(a * inv_sqrt2);
            double e = ep, em = 0;
            if (two_sided_) {
                const double b = (x + l * y) / s;  // -(lower standardized limit)
                em = 0.5 * std::erfc(b * inv_sqrt2);
                e += em;
            }
            e_sum += mult * e;
            if (e < 0.5) {
                log_inside += mult * std::log1p(-e);
            } else if (!two_sided_) {
                log_inside += mult * std::log(0.5 * std::erfc(-a * inv_sqrt2));
            } else {
                const double b = -(x + l * y) / s;  // lower limit, b < a
                double d;
                if (b >= 0) d = 0.5 * (std::erfc(b * inv_sqrt2) - std::erfc(a * inv_sqrt2));
                else if (a <= 0) d = 0.5 * (std::erfc(-a * inv_sqrt2) - std::erfc(-b * inv_sqrt2));
                else d = 1 - e;
                log_inside += mult * std::log(d);
            }
        }
        const double comp = -std::expm1(log_inside);
        if (!tilt) return std::exp(-0.5 * y * y - ln_sqrt_2pi) * comp;
        if (x <= 25) return std::exp(0.5 * x * x - 0.5 * y * y - ln_sqrt_2pi) * comp;
        // Far tail: e^{x^2/2} phi(y) e_i written around its centre y = +-lambda_i x:
        //   e^{x^2/2} phi(y) Q(a) = exp(-(y - l x)^2 / (2 s^2)) M(a) / (2 pi).
        double scaled = 0;
        for (std::size_t i = 0; i < lam_.size(); ++i) {
            const double l = lam_[i], s = sig_[i];
            double d = (y - l * x) / s;
            double t = std::exp(-0.5 * d * d - ln_2pi + log_mills((x - l * y) / s));
            if (two_sided_) {
                d = (y + l * x) / s;
                t += std::exp(-0.5 * d * d - ln_2pi + log_mills((x + l * y) / s));
            }
            scaled += mult_[i] * t;
        }
        return e_sum > 0 ? scaled * (comp / e_sum) : scaled;
    }

    bool two_sided_;
    std::size_t m_ = 0;
    double reach_ = 0;                       // max |lambda_i|
    std::vector<double> lam_, sig_, mult_;  // distinct lambda_i, sigma_i, multiplicities
};

dunnett_result product_upper(const dunnett_product& d, double c, double df) {
    if (!valid_df(df) || std::isnan(c)) return {nan, nan, method_product};
    if (std::isinf(c)) return {c > 0 ? 0.0 : 1.0, 0.0, method_product};
    auto [lp, rel] = d.log_upper(c, df);
    double p = std::exp(lp);
    return {p, p * rel + 1e-15, method_product};
}

dunnett_result product_upper(double c, const Eigen::VectorXd& lambda, double df, dunnett_sides sides) {
    dunnett_product d(lambda, sides == dunnett_sides::two_sided);
    if (!valid_df(df) || std::isnan(c)) return {nan, nan, method_product};
    if (std::isinf(c)) return {c > 0 ? 0.0 : 1.0, 0.0, method_product};
    auto [lp, rel] = d.log_upper(c, df);
    double p = std::exp(lp);
    return {p, p * rel + 1e-15, method_product};
}

// ---------------------------------------------------------------------------
// Dunnett: general correlation by randomized QMC (Genz 1992; Genz & Bretz 2002)
// ---------------------------------------------------------------------------

void check_corr(const Eigen::MatrixXd& corr) {
    if (corr.rows() != corr.cols() || corr.rows() == 0)
        throw groupfit::error("dunnett: the correlation matrix must be square and not empty");
    for (Eigen::Index i = 0; i < corr.rows(); ++i) {
        if (std::fabs(corr(i, i) - 1) > 1e-12)
            throw groupfit::error("dunnett: the correlation matrix must have a unit diagonal");
        for (Eigen::Index j = 0; j < i; ++j) {
            if (!(std::fabs(corr(i, j) - corr(j, i)) <= 1e-12 && std::fabs(corr(i, j)) <= 1))
                throw groupfit::error("dunnett: the correlation matrix must be symmetric with entries in [-1, 1]");
        }
    }
}

/// P(-c < T_i < c for all i) (two-sided) or P(T_i < c for all i), estimated
/// as the exact product-form probability for `control` (a lambda close to the
/// matrix's own structure) plus a QMC estimate of the difference: both
/// integrands are evaluated at the same points with the same variable order,
/// so the difference has a small variance when corr is close to product form
/// (a control variate; the estimator stays unbiased for any control).
class qmc_mvt {
public:
    qmc_mvt(const Eigen::MatrixXd& corr, double df, double c, bool two_sided,
            const Eigen::VectorXd& control)
        : m_(corr.rows()), df_(df) {
        // Cholesky with Genz-Bretz ordering (smallest expected interval first).
        Eigen::MatrixXd r = corr;
        std::vector<int> order(m_);
        for (int i = 0; i < m_; ++i) order[i] = i;
        std::vector<double> lo(m_, two_sided ? -c : -inf), hi(m_, c);
        l_ = Eigen::MatrixXd::Zero(m_, m_);
        std::vector<double> y(m_, 0.0);
        for (int i = 0; i < m_; ++i) {
            int best = i;
            double best_p = inf;
            for (int j = i; j < m_; ++j) {
                double v = r(j, j);
                for (int t = 0; t < i; ++t) v -= l_(j, t) * l_(j, t);
                if (v <= 0) continue;
                double sd = std::sqrt(v), mu = 0;
                for (int t = 0; t < i; ++t) mu += l_(j, t) * y[t];
                double p = norm_cdf((hi[j] - mu) / sd) - norm_cdf((lo[j] - mu) / sd);
                if (p < best_p) {
                    best_p = p;
                    best = j;
                }
            }
            if (best != i) {
                r.row(i).swap(r.row(best));
                r.col(i).swap(r.col(best));
                l_.row(i).swap(l_.row(best));
                std::swap(lo[i], lo[best]);
                std::swap(hi[i], hi[best]);
                std::swap(order[i], order[best]);
            }
            double v = r(i, i);
            for (int t = 0; t < i; ++t) v -= l_(i, t) * l_(i, t);
            if (!(v > 1e-14))
                throw groupfit::error("dunnett: the correlation matrix must be positive definite");
            l_(i, i) = std::sqrt(v);
            for (int j = i + 1; j < m_; ++j) {
                double s = r(j, i);
                for (int t = 0; t < i; ++t) s -= l_(j, t) * l_(i, t);
                l_(j, i) = s / l_(i, i);
            }
            // Expected value of the truncated normal on the chosen interval.
            double mu = 0;
            for (int t = 0; t < i; ++t) mu += l_(i, t) * y[t];
            double a = (lo[i] - mu) / l_(i, i), b = (hi[i] - mu) / l_(i, i);
            double pa = norm_cdf(a), pb = norm_cdf(b);
            double da = std::isinf(a) ? 0 : std::exp(-0.5 * a * a - ln_sqrt_2pi);
            double db = std::isinf(b) ? 0 : std::exp(-0.5 * b * b - ln_sqrt_2pi);
            y[i] = pb - pa > 1e-300 ? (da - db) / (pb - pa) : (std::isinf(a) ? b : a);
        }
        lo_ = lo;
        hi_ = hi;
        // The control's correlation in the same order.
        Eigen::MatrixXd rc(m_, m_);
        for (int i = 0; i < m_; ++i)
            for (int j = 0; j < m_; ++j)
                rc(i, j) = i == j ? 1.0 : control[order[i]] * control[order[j]];
        lc_ = rc.llt().matrixL();
        dim_ = (m_ - 1) + (std::isinf(df) ? 0 : 1);
        // Richtmyer generators: fractional parts of square roots of primes.
        int p = 2;
        while (static_cast<int>(gen_.size()) < dim_) {
            bool prime = true;
            for (int d = 2; d * d <= p; ++d) if (p % d == 0) { prime = false; break; }
            if (prime) gen_.push_back(std::fmod(std::sqrt(double(p)), 1.0));
            ++p;
        }
    }

    /// Estimate with its 99.9% error bound. The points of each shift
    /// form a Kronecker sequence, so doubling their number only adds points;
    /// doubling stops when the error is below tol or the budget of integrand
    /// evaluations is spent. points_used returns the number of points per
    /// shift; a fixed number can be imposed (common random numbers across
    /// calls, as the quantile search needs).
    std::pair<double, double> estimate(double tol, long fixed_points = 0, long* points_used = nullptr) const {
        constexpr int shifts = 16;
        // Half-width of a 99.9% confidence interval from 16 shift means: the
        // Student t quantile with 15 df (3 standard errors would be exceeded
        // about 1% of the time with this few shifts).
        static const double t999 =
            bm::quantile(bm::students_t_distribution<double, policy>(shifts - 1), 0.9995);
        constexpr long budget = 2000000;
        std::mt19937_64 rng(20240611);  // fixed seed: deterministic results
        std::uniform_real_distribution<double> unif(0.0, 1.0);
        std::vector<std::vector<double>> shift(shifts, std::vector<double>(dim_));
        for (auto& v : shift)
            for (auto& x : v) x = unif(rng);
        std::vector<double> acc(shifts, 0.0), w(dim_), w2(dim_), y(m_);
        auto point = [&](const std::vector<double>& u) {
            double s = 1;
            int d0 = 0;
            if (!std::isinf(df_)) {
                s = std::sqrt(2 * bm::gamma_p_inv(df_ / 2, std::clamp(u[0], 1e-16, 1 - 1e-16), fast_policy()) / df_);
                d0 = 1;
            }
            return sov(l_, u, d0, s, y) - sov(lc_, u, d0, s, y);
        };
        long done = 0, target = fixed_points > 0 ? fixed_points : 1024;
        std::pair<double, double> res{nan, nan};
        for (;;) {
            for (int s = 0; s < shifts; ++s) {
                for (long j = done + 1; j <= target; ++j) {
                    for (int d = 0; d < dim_; ++d) {
                        double x = j * gen_[d] + shift[s][d];
                        x -= std::floor(x);
                        w[d] = std::fabs(2 * x - 1);  // baker's transform
                        w2[d] = 1 - w[d];             // antithetic point
                    }
                    acc[s] += 0.5 * (point(w) + point(w2));
                }
            }
            done = target;
            double sum = 0, sum2 = 0;
            for (double a : acc) {
                sum += a / done;
                sum2 += (a / done) * (a / done);
            }
            const double mean = sum / shifts;
            const double var = std::max(0.0, (sum2 - shifts * mean * mean) / (shifts - 1));
            res = {mean, t999 * std::sqrt(var / shifts)};
            if (points_used) *points_used = done;
            if (fixed_points > 0 || res.second <= tol || 2 * (2 * done) * shifts > budget) break;
            target = 2 * done;
        }
        return res;
    }

private:
    // Double precision is ample inside the QMC integrand: no promotion.
    using fast_policy = bm::policies::policy<bm::policies::promote_double<false>,
                                             bm::policies::domain_error<bm::policies::ignore_error>,
                                             bm::policies::overflow_error<bm::policies::ignore_error>,
                                             bm::policies::evaluation_error<bm::policies::ignore_error>>;

    /// Separation of variables (Genz 1992) for Cholesky factor L at the point
    /// w (from index d), limits scaled by s.
    double sov(const Eigen::MatrixXd& L, const std::vector<double>& w, int d, double s,
               std::vector<double>& y) const {
        double f = 1;
        for (int i = 0; i < m_; ++i) {
            double mu = 0;
            for (int t = 0; t < i; ++t) mu += L(i, t) * y[t];
            double a = std::isinf(lo_[i]) ? 0.0 : norm_cdf((lo_[i] * s - mu) / L(i, i));
            double b = norm_cdf((hi_[i] * s - mu) / L(i, i));
            if (!(b > a)) return 0.0;
            f *= b - a;
            if (i + 1 < m_) {
                double u = std::clamp(a + w[d++] * (b - a), 1e-300, 1 - 1e-16);
                y[i] = -std::sqrt(2.0) * bm::erfc_inv(2 * u, fast_policy());
            }
        }
        return f;
    }

    int m_;
    double df_;
    int dim_ = 0;
    Eigen::MatrixXd l_, lc_;
    std::vector<double> lo_, hi_, gen_;
};

/// A lambda with corr_ij ~ lambda_i lambda_j (exact when corr has product
/// form): lambda_i^2 = R_ij R_ik / R_jk with the pair (j, k) of largest |R_jk|,
/// signs and entries that no triad determines from the largest entry found.
Eigen::VectorXd fit_lambda(const Eigen::MatrixXd& corr) {
    const Eigen::Index m = corr.rows();
    Eigen::VectorXd l = Eigen::VectorXd::Zero(m);
    std::vector<bool> known(m, false);
    for (Eigen::Index i = 0; i < m; ++i) {
        double best = 0;
        Eigen::Index bj = -1, bk = -1;
        for (Eigen::Index j = 0; j < m; ++j)
            for (Eigen::Index k = j + 1; k < m; ++k)
                if (j != i && k != i && std::fabs(corr(j, k)) > best) {
                    best = std::fabs(corr(j, k));
                    bj = j;
                    bk = k;
                }
        if (bj >= 0 && best > 1e-8) {
            l[i] = std::sqrt(std::max(0.0, corr(i, bj) * corr(i, bk) / corr(bj, bk)));
            known[i] = true;
        }
    }
    Eigen::Index ref = -1;
    for (Eigen::Index i = 0; i < m; ++i)
        if (known[i] && (ref < 0 || l[i] > l[ref])) ref = i;
    if (ref < 0) {
        // No usable triad: at most one nonzero off-diagonal pair; split it evenly.
        double best = 0;
        for (Eigen::Index j = 0; j < m; ++j)
            for (Eigen::Index k = j + 1; k < m; ++k)
                if (std::fabs(corr(j, k)) > best) {
                    best = std::fabs(corr(j, k));
                    ref = j;
                }
        if (ref >= 0) l[ref] = std::sqrt(best);
    }
    if (ref >= 0 && l[ref] > 0) {
        for (Eigen::Index i = 0; i < m; ++i)
            if (i != ref) l[i] = corr(i, ref) / l[ref];
    }
    for (Eigen::Index i = 0; i < m; ++i) {  // first nonzero entry positive
        if (l[i] != 0) {
            if (l[i] < 0) l = -l;
            break;
        }
    }
    return l;
}

/// The control variate's lambda: the nearest product form, inside (-1, 1).
Eigen::VectorXd control_lambda(const Eigen::MatrixXd& corr) {
    return fit_lambda(corr).cwiseMax(-0.99).cwiseMin(0.99);
}

}  // namespace

// ---------------------------------------------------------------------------
// Dunnett: public functions
// ---------------------------------------------------------------------------

Eigen::VectorXd many_to_one_lambda(const Eigen::VectorXd& n_treatment, double n_control) {
    if (!(n_control > 0)) throw groupfit::error("dunnett: the control group size must be positive");
    Eigen::VectorXd l(n_treatment.size());
    for (Eigen::Index i = 0; i < l.size(); ++i) {
        double n = n_treatment[i];
        if (!(n > 0)) throw groupfit::error("dunnett: every treatment group size must be positive");
        l[i] = std::sqrt(n / (n + n_control));
    }
    return l;
}

std::optional<Eigen::VectorXd> product_form_factors(const Eigen::MatrixXd& corr, double tolerance) {
    if (corr.rows() != corr.cols()) throw groupfit::error("dunnett: the correlation matrix must be square");
    const Eigen::VectorXd l = fit_lambda(corr);
    const Eigen::Index m = corr.rows();
    for (Eigen::Index i = 0; i < m; ++i) {
        if (!(std::fabs(l[i]) < 1)) return std::nullopt;
        for (Eigen::Index j = 0; j < m; ++j)
            if (i != j && !(std::fabs(corr(i, j) - l[i] * l[j]) <= tolerance)) return std::nullopt;
    }
    return l;
}

dunnett_result dunnett_product_upper_p(double c, const Eigen::VectorXd& lambda, double df,
                                       dunnett_sides sides) {
    return product_upper(c, lambda, df, sides);
}

dunnett_result dunnett_product_cdf(double c, const Eigen::VectorXd& lambda, double df,
                                   dunnett_sides sides) {
    dunnett_result r = product_upper(c, lambda, df, sides);
    return {1 - r.value, r.error_bound, r.method};
}

dunnett_result dunnett_product_quantile(double level, const Eigen::VectorXd& lambda, double df,
                                        dunnett_sides sides) {
    dunnett_product d(lambda, sides == dunnett_sides::two_sided);
    d.cache(true);  // the root search evaluates many nearby thresholds
    if (!valid_df(df) || !(level > 0 && level < 1)) return {nan, nan, method_product};
    const double target = std::log1p(-level);
    auto f = [&](double c) { return d.log_upper(c, df).first - target; };
    const bool two = sides == dunnett_sides::two_sided;
    double c = solve_monotone(f, two ? 0.5 : -1.0, 3.0, true, two ? 0.0 : -1e300, 1e300);
    // Error: the probability's error over the density at c.
    auto [lp, rel] = d.log_upper(c, df);
    double h = 1e-4 * std::max(1.0, std::fabs(c));
    double dens = (std::exp(d.log_upper(c - h, df).first) - std::exp(d.log_upper(c + h, df).first)) / (2 * h);
    double err = dens > 0 ? (std::exp(lp) * rel + 1e-15) / dens : nan;
    return {c, err + 4e-16 * std::fabs(c), method_product};
}

dunnett_result dunnett_upper_p(double c, const Eigen::MatrixXd& corr, double df, dunnett_sides sides,
                               double qmc_tolerance) {
    check_corr(corr);
    if (auto l = product_form_factors(corr)) return product_upper(c, *l, df, sides);
    if (!valid_df(df) || std::isnan(c)) return {nan, nan, method_qmc};
    const bool two = sides == dunnett_sides::two_sided;
    if (two && c <= 0) return {1.0, 0.0, method_qmc};
    if (std::isinf(c)) return {c > 0 ? 0.0 : 1.0, 0.0, method_qmc};
    const Eigen::VectorXd control = control_lambda(corr);
    const dunnett_result base = product_upper(c, control, df, sides);
    auto [diff, e] = qmc_mvt(corr, df, c, two, control).estimate(qmc_tolerance);
    // upper = 1 - (P_control + diff) = upper_control - diff.
    return {std::clamp(base.value - diff, 0.0, 1.0), e + base.error_bound, method_qmc};
}

dunnett_result dunnett_cdf(double c, const Eigen::MatrixXd& corr, double df, dunnett_sides sides,
                           double qmc_tolerance) {
    dunnett_result r = dunnett_upper_p(c, corr, df, sides, qmc_tolerance);
    return {1 - r.value, r.error_bound, r.method};
}

dunnett_result dunnett_quantile(double level, const Eigen::MatrixXd& corr, double df,
                                dunnett_sides sides, double qmc_tolerance) {
    check_corr(corr);
    if (auto l = product_form_factors(corr)) return dunnett_product_quantile(level, *l, df, sides);
    if (!valid_df(df) || !(level > 0 && level < 1)) return {nan, nan, method_qmc};
    const bool two = sides == dunnett_sides::two_sided;
    // Start from the critical value of the nearest product form, fix the
    // number of points there, and solve on that deterministic estimate (common
    // random numbers make it a smooth function of c).
    const Eigen::VectorXd control = control_lambda(corr);
    const double c0 = dunnett_product_quantile(level, control, df, sides).value;
    long n = 0;
    qmc_mvt(corr, df, c0, two, control).estimate(qmc_tolerance, 0, &n);
    double err = 0;  // error estimate of the last evaluation
    auto prob = [&](double c) {
        if (two && c <= 0) return 0.0;
        auto [diff, e] = qmc_mvt(corr, df, c, two, control).estimate(qmc_tolerance, n);
        err = e;
        return dunnett_product_cdf(c, control, df, sides).value + diff;
    };
    // Secant steps from the product-form value (the estimate is smooth in c),
    // to a step below 1e-6 relative (well inside the QMC error); the last
    // slope is the density used for the error bound.
    double c_prev = c0, g_prev = prob(c0) - level;
    double c = c0 * (1 + 1e-3) + 1e-3, g = prob(c) - level;
    for (int i = 0; i < 20 && g != g_prev; ++i) {
        const double next = c - g * (c - c_prev) / (g - g_prev);
        c_prev = c;
        g_prev = g;
        c = next;
        g = prob(c) - level;
        if (std::fabs(c - c_prev) <= 1e-6 * std::max(1.0, std::fabs(c))) break;
    }
    const double slope = (g - g_prev) / (c - c_prev);
    return {c, slope > 0 ? err / slope : nan, method_qmc};
}

std::vector<dunnett_result> dunnett_adjusted_p(const Eigen::VectorXd& t, const Eigen::MatrixXd& corr,
                                               double df, dunnett_sides sides, double qmc_tolerance) {
    check_corr(corr);
    if (t.size() != corr.rows())
        throw groupfit::error("dunnett: there must be one statistic per row of the correlation matrix");
    std::vector<dunnett_result> out;
    const bool two = sides == dunnett_sides::two_sided;
    if (auto l = product_form_factors(corr)) {
        // One product-form object for every statistic: the inner integrals are
        // shared through its interpolation cache.
        dunnett_product d(*l, two);
        d.cache(t.size() > 1);
        for (Eigen::Index i = 0; i < t.size(); ++i)
            out.push_back(product_upper(d, two ? std::fabs(t[i]) : t[i], df));
        return out;
    }
    for (Eigen::Index i = 0; i < t.size(); ++i)
        out.push_back(dunnett_upper_p(two ? std::fabs(t[i]) : t[i], corr, df, sides, qmc_tolerance));
    return out;
}

}  // namespace groupfit::dist

// ---------------------------------------------------------------------------
// Dunnett for diag(a) + V V' covariances: conditional independence given w
// ---------------------------------------------------------------------------
namespace groupfit::dist {

namespace {

const char* const method_lowrank =
    "low-rank conditional integral (randomized QMC, product-form control)";

/// Chebyshev interpolant on [lo, hi] from values at the n Chebyshev points.
struct cheb {
    double lo = 0, hi = 1;
    std::vector<double> coef;
    static std::vector<double> nodes(double lo, double hi, int n) {
        std::vector<double> x(n);
        for (int j = 0; j < n; ++j) x[j] = lo + 0.5 * (hi - lo) * (std::cos(pi * (j + 0.5) / n) + 1.0);
        return x;
    }
    cheb(double l, double h, const std::vector<double>& v) : lo(l), hi(h), coef(v.size()) {
        const int n = static_cast<int>(v.size());
        for (int k = 0; k < n; ++k) {
            double sum = 0;
            for (int j = 0; j < n; ++j) sum += v[j] * std::cos(pi * k * (j + 0.5) / n);
            coef[k] = (k == 0 ? 1.0 : 2.0) * sum / n;
        }
    }
    double operator()(double x) const {
        const double t = hi > lo ? std::clamp(2.0 * (x - lo) / (hi - lo) - 1.0, -1.0, 1.0) : 0.0;
        double b1 = 0, b2 = 0;
        for (std::size_t k = coef.size() - 1; k >= 1; --k) {
            const double b0 = 2 * t * b1 - b2 + coef[k];
            b2 = b1;
            b1 = b0;
        }
        return t * b1 - b2 + coef[0];
    }
};

}  // namespace

dunnett_family_result dunnett_lowrank(const Eigen::VectorXd& t, const lowrank_covariance& cov,
                                      double df, dunnett_sides sides, double level) {
    const Eigen::Index m = cov.a.size(), r = cov.V.cols();
    if (m == 0 || cov.V.rows() != m || r < 1 || t.size() != m)
        throw groupfit::error("dunnett: the low-rank covariance does not match the statistics");
    for (Eigen::Index i = 0; i < m; ++i)
        if (!(cov.a[i] > 0) || !std::isfinite(cov.V.row(i).squaredNorm()))
            throw groupfit::error("dunnett: the low-rank covariance is not valid");
    const bool two = sides == dunnett_sides::two_sided;
    dunnett_family_result out;
    // Standardised: T_i = Z_i / (s_i S), Z_i = sqrt(a_i) e_i + V_i w.
    Eigen::VectorXd s(m), sd(m), lam(m), tau(m);
    Eigen::MatrixXd Vs(m, r);
    for (Eigen::Index i = 0; i < m; ++i) {
        s[i] = std::sqrt(cov.a[i] + cov.V.row(i).squaredNorm());
        Vs.row(i) = cov.V.row(i) / s[i];
        sd[i] = std::sqrt(cov.a[i]) / s[i];
        lam[i] = Vs(i, 0);
        tau[i] = std::sqrt(std::max(0.0, 1.0 - lam[i] * lam[i]));
    }
    dunnett_product prod(lam, two);
    prod.cache(true);
    auto stat = [&](Eigen::Index i) { return two ? std::fabs(t[i]) : t[i]; };
    const bool covariates = r > 1 && Vs.rightCols(r - 1).cwiseAbs().maxCoeff() > 0;
    const dunnett_result q_prod = [&] {
        // The product-form quantile (cached object).
        if (!valid_df(df) || !(level > 0 && level < 1)) return dunnett_result{nan, nan, method_product};
        const double target = std::log1p(-level);
        auto f = [&](double c) { return prod.log_upper(c, df).first - target; };
        const double c = solve_monotone(f, two ? 0.5 : -1.0, 3.0, true, two ? 0.0 : -1e300, 1e300);
        return dunnett_result{c, 0.0, method_product};
    }();
    if (!covariates) {
        for (Eigen::Index i = 0; i < m; ++i) out.adjusted_p.push_back(product_upper(prod, stat(i), df));
        out.quantile = dunnett_product_quantile(level, lam, df, sides);
        return out;
    }
    if (!valid_df(df)) {
        for (Eigen::Index i = 0; i < m; ++i) out.adjusted_p.push_back({nan, nan, method_lowrank});
        out.quantile = {nan, nan, method_lowrank};
        return out;
    }
    // Threshold range: every statistic and the neighbourhood of the critical
    // value, in z = asinh(c); beyond the product form's 1e-16 upper point the
    // difference is below that too and is taken as 0.
    double c_lo = std::isnan(q_prod.value) ? 0.0 : q_prod.value - 1.0, c_hi = q_prod.value + 1.0;
    if (std::isnan(c_hi)) c_hi = 1.0;
    for (Eigen::Index i = 0; i < m; ++i)
        if (std::isfinite(stat(i))) c_lo = std::min(c_lo, stat(i)), c_hi = std::max(c_hi, stat(i));
    if (two) c_lo = std::max(c_lo, 0.0);
    const double c_cap = solve_monotone([&](double c) { return prod.log_upper(c, df).first - std::log(1e-16); },
                                        two ? 0.5 : -1.0, 3.0, true, two ? 0.0 : -1e300, 1e300);
    c_hi = std::min(c_hi, c_cap);
    c_lo = std::min(c_lo, c_hi);
    constexpr int nodes_n = 20;
    const std::vector<double> z = cheb::nodes(std::asinh(c_lo), std::asinh(c_hi), nodes_n);
    std::vector<double> cnode(nodes_n);
    for (int j = 0; j < nodes_n; ++j) cnode[j] = std::sinh(z[j]);

    // QMC over (w_1..w_r, S): Richtmyer generators, baker's transform,
    // antithetic pairs, 16 shifts from a fixed seed.
    const int dim = static_cast<int>(r) + (std::isinf(df) ? 0 : 1);
    std::vector<double> gen;
    for (int pr = 2; static_cast<int>(gen.size()) < dim; ++pr) {
        bool prime = true;
        for (int d = 2; d * d <= pr; ++d)
            if (pr % d == 0) prime = false;
        if (prime) gen.push_back(std::fmod(std::sqrt(double(pr)), 1.0));
    }
    constexpr int shifts = 16;
    constexpr long points = 64;  // per shift (x2 antithetic)
    static const double t999 =
        bm::quantile(bm::students_t_distribution<double, policy>(shifts - 1), 0.9995);
    std::mt19937_64 rng(20261202);
    std::uniform_real_distribution<double> unif(0.0, 1.0);
    std::vector<double> u(dim), w(r), mu(m), mu1(m);
    auto phi = [](double x) { return 0.5 * std::erfc(-x * inv_sqrt2); };
    auto eval = [&](std::vector<double>& a, const std::vector<double>& uu) {
        for (Eigen::Index k = 0; k < r; ++k)
            w[k] = -std::sqrt(2.0) * boost::math::erfc_inv(2.0 * std::clamp(uu[k], 1e-16, 1 - 1e-16), policy());
        double S = 1.0;
        if (!std::isinf(df))
            S = std::sqrt(2 * bm::gamma_p_inv(df / 2, std::clamp(uu[r], 1e-16, 1 - 1e-16), policy()) / df);
        for (Eigen::Index i = 0; i < m; ++i) {
            double v = 0;
            for (Eigen::Index k = 0; k < r; ++k) v += Vs(i, k) * w[k];
            mu[i] = v;
            mu1[i] = lam[i] * w[0];
        }
        for (int j = 0; j < nodes_n; ++j) {
            const double x = cnode[j] * S;
            double g = 1, g1 = 1;
            for (Eigen::Index i = 0; i < m; ++i) {
                if (two) {
                    g *= phi((x - mu[i]) / sd[i]) - phi((-x - mu[i]) / sd[i]);
                    g1 *= phi((x - mu1[i]) / tau[i]) - phi((-x - mu1[i]) / tau[i]);
                } else {
                    g *= phi((x - mu[i]) / sd[i]);
                    g1 *= phi((x - mu1[i]) / tau[i]);
                }
            }
            a[j] += g - g1;
        }
    };
    // Points are doubled (the Kronecker sequence of each shift only grows)
    // until the largest 99.9% half-width over the nodes is below 1e-6, or the
    // budget of conditional-product evaluations is spent.
    std::vector<double> anti(dim);
    std::vector<std::vector<double>> shift(shifts, std::vector<double>(dim));
    for (auto& v : shift)
        for (auto& x : v) x = unif(rng);
    std::vector<std::vector<double>> sum(shifts, std::vector<double>(nodes_n, 0.0));
    std::vector<double> mean(nodes_n), half(nodes_n);
    double err = 0;
    constexpr double tol = 1e-6;
    const double budget = 1e7;  // node x comparison products
    long done = 0, target = points;
    for (;;) {
        for (int sh = 0; sh < shifts; ++sh)
            for (long j = done + 1; j <= target; ++j) {
                for (int d = 0; d < dim; ++d) {
                    double x = j * gen[d] + shift[sh][d];
                    x -= std::floor(x);
                    u[d] = std::fabs(2 * x - 1);
                    anti[d] = 1 - u[d];
                }
                eval(sum[sh], u);
                eval(sum[sh], anti);
            }
        done = target;
        err = 0;
        for (int k = 0; k < nodes_n; ++k) {
            double s1 = 0, s2 = 0;
            for (int sh = 0; sh < shifts; ++sh) {
                const double v = sum[sh][k] / (2.0 * done);
                s1 += v, s2 += v * v;
            }
            mean[k] = s1 / shifts;
            const double var = std::max(0.0, (s2 - shifts * mean[k] * mean[k]) / (shifts - 1));
            half[k] = t999 * std::sqrt(var / shifts);
            err = std::max(err, half[k]);
        }
        if (err <= tol || 4.0 * double(done) * shifts * nodes_n * double(m) > budget) break;
        target = 2 * done;
    }
    const cheb diff(std::asinh(c_lo), std::asinh(c_hi), mean);
    auto d_at = [&](double c) { return c > c_hi || c < c_lo ? 0.0 : diff(std::asinh(c)); };
    for (Eigen::Index i = 0; i < m; ++i) {
        const double c = stat(i);
        const dunnett_result base = product_upper(prod, c, df);
        if (std::isnan(base.value) || std::isinf(c)) {
            out.adjusted_p.push_back({base.value, base.error_bound, method_lowrank});
            continue;
        }
        // upper = 1 - (P_product + D) = upper_product - D.
        out.adjusted_p.push_back({std::clamp(base.value - d_at(c), 0.0, 1.0), base.error_bound + err,
                                  method_lowrank});
    }
    // Critical value: P_product(c) + D(c) = level, secant from the product form's.
    if (std::isnan(q_prod.value)) {
        out.quantile = {nan, nan, method_lowrank};
        return out;
    }
    auto g = [&](double c) {
        return -std::expm1(prod.log_upper(c, df).first) + d_at(c) - level;
    };
    double c0 = q_prod.value, c1 = c0 * (1 + 1e-3) + 1e-3;
    double g0 = g(c0), g1 = g(c1);
    for (int it = 0; it < 30 && g1 != g0; ++it) {
        const double c2 = c1 - g1 * (c1 - c0) / (g1 - g0);
        c0 = c1, g0 = g1, c1 = c2, g1 = g(c1);
        if (std::fabs(c1 - c0) <= 1e-10 * std::max(1.0, std::fabs(c1))) break;
    }
    const double slope = (g1 - g0) / (c1 - c0);
    out.quantile = {c1, slope > 0 ? err / slope : nan, method_lowrank};
    return out;
}

}  // namespace groupfit::dist
