#include "factorial.hpp"

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <numeric>

#include "coding.hpp"
#include "dist.hpp"
#include "error.hpp"

namespace groupfit {

namespace {

constexpr double nan = std::numeric_limits<double>::quiet_NaN();
constexpr char cross_magic[4] = {'G', 'F', 'x', '1'};
/// Relative size below which a pivot of the scaled design counts as zero.
constexpr double rank_tolerance = 1e-10;
/// Relative size of the non-estimable part of a linear function.
constexpr double estimable_tolerance = 1e-7;

value num(double v) { return std::isnan(v) ? value{} : value{v}; }
value text(std::string s) { return value{std::move(s)}; }
value integer(std::int64_t v) { return value{v}; }

void put_u64(std::string& out, std::uint64_t v) {
    for (int b = 0; b < 8; ++b) out += static_cast<char>((v >> (8 * b)) & 0xff);
}
std::uint64_t get_u64(const unsigned char* p) {
    std::uint64_t v = 0;
    for (int b = 0; b < 8; ++b) v |= std::uint64_t(p[b]) << (8 * b);
    return v;
}

std::string join(const std::vector<std::string>& parts, const char* sep) {
    std::string s;
    for (std::size_t i = 0; i < parts.size(); ++i) s += (i ? sep : "") + parts[i];
    return s;
}

/// Orthonormal Helmert columns over L levels (L x (L-1)): every column sums to
/// zero, and together they span all contrasts of the L levels.
Eigen::MatrixXd helmert_basis(std::size_t L) {
    Eigen::MatrixXd h = Eigen::MatrixXd::Zero(L, L > 0 ? L - 1 : 0);
    for (std::size_t j = 1; j < L; ++j) {
        const double s = std::sqrt(double(j) * double(j + 1));
        for (std::size_t i = 0; i < j; ++i) h(i, j - 1) = 1.0 / s;
        h(j, j - 1) = -double(j) / s;
    }
    return h;
}

/// One term of the model: a set of factors (mask), with a covariate when the
/// term is a slope (cov >= 0; mask 0 is the covariate's common slope).
struct term {
    unsigned mask = 0;
    int cov = -1;
    std::string name;
    std::size_t first = 0, ncols = 0;
    bool contains(const term& o) const {  // o's variables are a proper subset of this term's
        if (o.cov >= 0 && o.cov != cov) return false;
        if ((o.mask & mask) != o.mask) return false;
        return o.mask != mask || (o.cov < 0 && cov >= 0);
    }
};

/// A least-squares solution over a subset of the design columns.
struct solution {
    std::vector<std::size_t> cols;
    Eigen::ColPivHouseholderQR<Eigen::MatrixXd> qr;
    Eigen::VectorXd scale;
    Eigen::VectorXd qty;
    int rank = 0;
    double sse = 0.0;
};

/// A linear function h'b + c of the design coefficients.
struct lin {
    Eigen::VectorXd h;
    double c = 0.0;
};

class engine {
public:
    engine(const summary& s, const options& o, int crossed);

    const summary& s;
    options o;
    int K = 1, p = 0;
    bool plain = true;  // a one-factor grouping (not groupfit_cross)
    std::vector<std::vector<level>> lv;
    std::vector<std::vector<std::string>> lab;
    std::vector<std::string> fname, cname;
    struct cell {
        std::size_t sc;
        std::vector<int> idx;
        std::size_t all;
        double w;
        std::int64_t n;
        std::vector<double> m;  // shifted means of x1..xp, y
    };
    std::vector<cell> cells;                    // observed, in combination order
    std::vector<std::ptrdiff_t> observed;       // combination -> observed cell or -1
    std::vector<std::size_t> stride;            // mixed radix of combinations
    std::size_t combos = 1;
    std::vector<double> ox;
    double oy = 0.0;
    std::int64_t n = 0;
    double wsum = 0.0;
    std::vector<Eigen::MatrixXd> H;
    std::vector<term> terms;                    // the model, intercept excluded
    std::size_t ncols = 1;                      // design columns, intercept included
    Eigen::MatrixXd A;                          // design rows, y last
    solution full;
    Eigen::VectorXd at;                         // raw covariate values for means

    std::vector<int> idx_of(std::size_t combo) const {
        std::vector<int> idx(K);
        for (int k = 0; k < K; ++k) idx[k] = int(combo / stride[k] % lv[k].size());
        return idx;
    }
    std::string cell_label(const std::vector<int>& idx) const {
        std::vector<std::string> parts;
        for (int k = 0; k < K; ++k) parts.push_back(lab[k][idx[k]]);
        return join(parts, "/");
    }
    std::string mask_name(unsigned mask) const {
        std::vector<std::string> parts;
        for (int k = 0; k < K; ++k)
            if (mask >> k & 1u) parts.push_back(fname[k]);
        return join(parts, " \u00d7 ");
    }
    std::size_t mask_cols(unsigned mask) const {
        std::size_t c = 1;
        for (int k = 0; k < K; ++k)
            if (mask >> k & 1u) c *= lv[k].size() - 1;
        return c;
    }
    /// Kronecker product of the Helmert rows of the factors in mask.
    void basis(unsigned mask, const std::vector<int>& idx, double scale, double* out) const {
        std::size_t len = 1;
        out[0] = scale;
        for (int k = 0; k < K; ++k) {
            if (!(mask >> k & 1u)) continue;
            const std::size_t m = lv[k].size() - 1;
            for (std::size_t a = len; a-- > 0;) {
                const double v = out[a];
                for (std::size_t j = 0; j < m; ++j) out[a * m + j] = v * H[k](idx[k], j);
            }
            len *= m;
        }
    }
    /// The design row of combination idx at shifted covariate values xs.
    void design_row(const std::vector<int>& idx, const double* xs, double scale, double* out) const {
        out[0] = scale;
        for (const term& t : terms)
            basis(t.mask, idx, t.cov < 0 ? scale : scale * xs[t.cov], out + t.first);
    }
    std::vector<std::size_t> columns_without(const std::vector<bool>& drop) const {
        std::vector<std::size_t> c{0};
        for (std::size_t i = 0; i < terms.size(); ++i)
            if (!drop[i])
                for (std::size_t j = 0; j < terms[i].ncols; ++j) c.push_back(terms[i].first + j);
        return c;
    }
    solution solve(std::vector<std::size_t> cols) const;
    /// Value, scaled variance and estimability of h'b under the full model.
    estimate evaluate(const lin& f) const;
    double scaled_cov(const Eigen::VectorXd& h1, const Eigen::VectorXd& h2) const;
    Eigen::VectorXd reduce(const Eigen::VectorXd& h, bool& ok) const;
    double sigma2() const { return df_resid() > 0 ? full.sse / df_resid() : nan; }
    double df_resid() const { return double(n) - full.rank; }
    /// The mean of combination idx at the covariate values `at`.
    lin cell_mean(const std::vector<int>& idx) const { return cell_mean_at(idx, at); }
    lin cell_mean_at(const std::vector<int>& idx, const Eigen::VectorXd& raw) const {
        lin f;
        f.h.resize(ncols);
        std::vector<double> xs(p);
        for (int j = 0; j < p; ++j) xs[j] = raw[j] - ox[j];
        design_row(idx, xs.data(), 1.0, f.h.data());
        f.c = oy;
        return f;
    }
    /// Mean over the combinations whose factors in `fixed` (factor, level)
    /// take the given levels: each combination alike (equal), or weighted by
    /// the observed cells' weight sums (proportional). ok=false when no
    /// observed cell matches a proportional mean.
    lin marginal_mean(const std::vector<std::pair<int, int>>& fixed, means_kind how, bool& ok) const;
    /// Rows and weight sum of the observed cells that match.
    void observed_totals(const std::vector<std::pair<int, int>>& fixed, std::int64_t& rows,
                         double& w, double& mean, double& sd) const;
    bool matches(const std::vector<int>& idx, const std::vector<std::pair<int, int>>& fixed) const {
        for (auto [k, l] : fixed)
            if (idx[k] != l) return false;
        return true;
    }
    int factor_index(const std::string& name, const char* option) const {
        for (int k = 0; k < K; ++k)
            if (fname[k] == name) return k;
        throw error(std::string("options: ") + option + " names '" + name +
                    "', which is not a factor of the model (factors: " + join(fname, ", ") + ")");
    }
    std::string at_text() const {
        std::string a;
        for (int j = 0; j < p; ++j) a += (j ? ", " : "") + cname[j] + "=" + shortest_real(at[j]);
        return a;
    }
    std::vector<std::string> empty_cells() const {
        std::vector<std::string> out;
        for (std::size_t c = 0; c < combos; ++c)
            if (observed[c] < 0) out.push_back(cell_label(idx_of(c)));
        return out;
    }
    double ss_total() const {
        // Weighted SS of y about its weighted mean: within + between cells.
        double ss = 0.0;
        for (const cell& c : cells) ss += c.w * c.m[p] * c.m[p];
        return ss + within_ss_y;
    }
    double within_ss_y = 0.0;

private:
    void build_design();
};

engine::engine(const summary& sm, const options& opt, int crossed) : s(sm), o(opt) {
    if (s.cells() == 0) throw error("the model has no rows");
    p = s.covariates();
    plain = crossed == 0;
    K = plain ? 1 : crossed;
    if (!o.order.empty() && !plain)
        throw error("options: order= applies to one-factor models; the levels of crossed factors "
                    "are in ascending order");
    // Names: the factors, then the covariates.
    if (o.names.size() > static_cast<std::size_t>(K + p))
        throw error("options: names lists " + std::to_string(o.names.size()) +
                    " names but the model has " + std::to_string(K) + " factor(s) and " +
                    std::to_string(p) + " covariate(s)");
    for (int k = 0; k < K; ++k) fname.push_back(plain ? "group" : "factor" + std::to_string(k + 1));
    for (int j = 0; j < p; ++j) cname.push_back("x" + std::to_string(j + 1));
    for (std::size_t i = 0; i < o.names.size(); ++i)
        (i < std::size_t(K) ? fname[i] : cname[i - K]) = o.names[i];

    // The levels of each factor, ascending.
    std::vector<std::vector<level>> parts(s.cells());
    lv.assign(K, {});
    for (std::size_t c = 0; c < s.cells(); ++c) {
        if (plain) parts[c] = {s.cell_level(c)};
        else decode_cross(s.cell_level(c).bytes, parts[c]);
        for (int k = 0; k < K; ++k) lv[k].push_back(parts[c][k]);
    }
    stride.assign(K, 1);
    for (int k = K; k-- > 0;) {
        std::sort(lv[k].begin(), lv[k].end());
        lv[k].erase(std::unique(lv[k].begin(), lv[k].end()), lv[k].end());
        lab.insert(lab.begin(), std::vector<std::string>());
        for (const auto& l : lv[k]) lab.front().push_back(l.label());
        if (combos > max_combinations / lv[k].size())
            throw error("the crossed factors have more than " + std::to_string(max_combinations) +
                        " combinations of levels; cross fewer factors or levels");
        stride[k] = combos;
        combos *= lv[k].size();
    }
    // Observed cells in combination order (last factor fastest).
    observed.assign(combos, -1);
    std::vector<std::pair<std::size_t, std::size_t>> order;  // (combination, summary cell)
    std::vector<std::vector<int>> idxs(s.cells());
    for (std::size_t c = 0; c < s.cells(); ++c) {
        std::vector<int> idx(K);
        std::size_t all = 0;
        for (int k = 0; k < K; ++k) {
            idx[k] = int(std::lower_bound(lv[k].begin(), lv[k].end(), parts[c][k]) - lv[k].begin());
            all += stride[k] * idx[k];
        }
        idxs[c] = idx;
        order.emplace_back(all, c);
    }
    std::sort(order.begin(), order.end());
    for (auto [all, c] : order) {
        observed[all] = std::ptrdiff_t(cells.size());
        cells.push_back({c, idxs[c], all, s.cell_d(c)[0].value(), s.cell_rows(c), {}});
    }
    for (const cell& c : cells) n += c.n, wsum += c.w;

    // Shifted coordinates: the weighted grand mean of every column, summed in
    // double-double relative to the first cell's origin; covariates are then
    // shifted to the values of at= (default: those means), so that every term
    // of a model whose slopes vary is tested at those covariate values.
    ox.assign(p, 0.0);
    std::vector<double> grand(p + 1);
    for (int j = 0; j <= p; ++j) {
        const double base = s.cell_origin(cells[0].sc)[j];
        ddouble acc = 0.0;
        for (const cell& c : cells) acc += s.cell_mean_from(c.sc, j, base) * c.w;
        grand[j] = (ddouble(base) + acc / ddouble(wsum)).value();
    }
    // Covariate values for means: their means, overridden by at=.
    at.resize(p);
    for (int j = 0; j < p; ++j) at[j] = grand[j];
    for (const auto& [name, v] : o.at) {
        int j = -1;
        for (int i = 0; i < p; ++i)
            if (cname[i] == name) j = i;
        if (j < 0)
            throw error("options: at names an unknown covariate '" + name + "' (covariates: " +
                        (p ? join(cname, ", ") : std::string("none")) + ")");
        at[j] = v;
    }
    for (int j = 0; j <= p; ++j) {
        const double origin = j < p ? at[j] : grand[p];
        for (cell& c : cells) c.m.push_back(s.cell_mean_from(c.sc, j, origin).value());
        if (j < p) ox[j] = origin; else oy = origin;
    }

    // The terms.
    std::vector<unsigned> masks;
    for (int size = 1; size <= K; ++size)
        for (unsigned m = 1; m < (1u << K); ++m) {
            if (__builtin_popcount(m) != size) continue;
            if (o.terms == terms_kind::main && size > 1) continue;
            if (o.terms == terms_kind::two_way && size > 2) continue;
            masks.push_back(m);
        }
    if (plain && o.has_terms)
        throw error("options: terms= applies to crossed factors (groupfit_cross); this model has one grouping");
    if (o.slopes != slopes_kind::common && p == 0)
        throw error("options: slopes=" + std::string(slopes_name(o.slopes)) +
                    " needs covariates; this model has none");
    for (unsigned m : masks) terms.push_back({m, -1, mask_name(m)});
    for (int j = 0; j < p; ++j) terms.push_back({0u, j, cname[j]});
    for (int j = 0; j < p; ++j) {
        if (o.slopes == slopes_kind::separate) terms.push_back({1u, j, mask_name(1u) + " \u00d7 " + cname[j]});
        if (o.slopes == slopes_kind::cell)
            for (unsigned m : masks) terms.push_back({m, j, mask_name(m) + " \u00d7 " + cname[j]});
    }
    for (term& t : terms) {
        t.first = ncols;
        t.ncols = t.mask ? mask_cols(t.mask) : 1;
        ncols += t.ncols;
    }
    if (ncols > max_design_columns)
        throw error("the model has " + std::to_string(ncols) + " design columns; the limit is " +
                    std::to_string(max_design_columns) +
                    " (use terms=main or terms=two_way, or fewer levels)");
    // Each factor's Helmert basis is dense (levels x (levels - 1)): made only
    // once the design is known to be within the limit.
    H.clear();
    for (int k = 0; k < K; ++k) H.push_back(helmert_basis(lv[k].size()));

    build_design();
    std::vector<std::size_t> all(ncols);
    std::iota(all.begin(), all.end(), 0);
    full = solve(all);
}

void engine::build_design() {
    bool pooled = true;
    for (const term& t : terms)
        if (t.cov >= 0 && t.mask) pooled = false;
    const int k = p + 2;
    const std::size_t within_rows = pooled ? std::size_t(p + 1) : cells.size() * (p + 1);
    A = Eigen::MatrixXd::Zero(cells.size() + within_rows, ncols + 1);
    std::vector<double> xs(p);
    for (std::size_t r = 0; r < cells.size(); ++r) {
        const cell& c = cells[r];
        const double sw = std::sqrt(c.w);
        std::vector<double> row(ncols);
        design_row(c.idx, c.m.data(), sw, row.data());
        for (std::size_t j = 0; j < ncols; ++j) A(r, j) = row[j];
        A(r, ncols) = sw * c.m[p];
    }
    // The within-cell factor rows of each cell over [x, y] (deviations from the
    // cell means): row i = sqrt(d_i) [0.. 1, rbar_i,i+1 ..].
    Eigen::MatrixXd w = Eigen::MatrixXd::Zero(cells.size() * (p + 1), p + 1);
    for (std::size_t r = 0; r < cells.size(); ++r) {
        const ddouble* d = s.cell_d(cells[r].sc);
        const ddouble* rb = s.cell_rbar(cells[r].sc);
        for (int i = 1; i < k; ++i) {
            const double sd = std::sqrt(std::max(0.0, d[i].value()));
            if (sd == 0.0) continue;
            for (int j = i; j < k; ++j)
                w(r * (p + 1) + (i - 1), j - 1) =
                    j == i ? sd : sd * rb[detail::rbar_index(k, i, j)].value();
        }
    }
    within_ss_y = w.col(p).squaredNorm();
    const std::size_t base = cells.size();
    if (pooled) {
        Eigen::HouseholderQR<Eigen::MatrixXd> qr(w);
        Eigen::MatrixXd R = qr.matrixQR().topRows(std::min<Eigen::Index>(w.rows(), p + 1))
                                .triangularView<Eigen::Upper>();
        for (Eigen::Index i = 0; i < R.rows(); ++i) {
            for (const term& t : terms)
                if (t.cov >= 0) A(base + i, t.first) = R(i, t.cov);
            A(base + i, ncols) = R(i, p);
        }
        return;
    }
    std::vector<double> row(ncols);
    for (std::size_t r = 0; r < cells.size(); ++r)
        for (int i = 0; i <= p; ++i) {
            const std::size_t ar = base + r * (p + 1) + i;
            std::fill(row.begin(), row.end(), 0.0);
            for (const term& t : terms)
                if (t.cov >= 0) basis(t.mask, cells[r].idx, w(r * (p + 1) + i, t.cov), &row[t.first]);
            for (std::size_t j = 0; j < ncols; ++j) A(ar, j) = row[j];
            A(ar, ncols) = w(r * (p + 1) + i, p);
        }
}

solution engine::solve(std::vector<std::size_t> cols) const {
    solution out;
    out.cols = std::move(cols);
    const Eigen::Index m = A.rows(), c = Eigen::Index(out.cols.size());
    Eigen::MatrixXd B(m, c);
    out.scale.resize(c);
    for (Eigen::Index j = 0; j < c; ++j) {
        B.col(j) = A.col(out.cols[j]);
        const double nrm = B.col(j).norm();
        out.scale[j] = nrm > 0 ? nrm : 1.0;
        B.col(j) /= out.scale[j];
    }
    out.qr.setThreshold(rank_tolerance);
    out.qr.compute(B);
    out.rank = int(out.qr.rank());
    out.qty = out.qr.householderQ().adjoint() * A.col(ncols);
    out.sse = out.qty.tail(m - out.rank).squaredNorm();
    return out;
}

Eigen::VectorXd engine::reduce(const Eigen::VectorXd& h, bool& ok) const {
    // u = R11^-T (P' D^-1 h)_1; estimable when (P' D^-1 h)_2 = R12' u.
    const int r = full.rank;
    const Eigen::Index c = Eigen::Index(full.cols.size());
    Eigen::VectorXd hs = h.cwiseQuotient(full.scale);
    Eigen::VectorXd hp = full.qr.colsPermutation().transpose() * hs;
    const auto& R = full.qr.matrixR();
    Eigen::VectorXd u = R.topLeftCorner(r, r).triangularView<Eigen::Upper>().transpose().solve(hp.head(r));
    const Eigen::VectorXd rest = hp.tail(c - r) - R.topRightCorner(r, c - r).transpose() * u;
    ok = rest.norm() <= estimable_tolerance * std::max(1.0, hp.norm());
    return u;
}

estimate engine::evaluate(const lin& f) const {
    bool ok = true;
    const Eigen::VectorXd u = reduce(f.h, ok);
    if (!ok) return {nan, nan, false};
    const double value = f.c + u.dot(full.qty.head(full.rank));
    const double s2 = sigma2();
    return {value, std::isnan(s2) ? nan : std::sqrt(s2 * u.squaredNorm()), true};
}

double engine::scaled_cov(const Eigen::VectorXd& h1, const Eigen::VectorXd& h2) const {
    bool ok = true;
    return reduce(h1, ok).dot(reduce(h2, ok));
}

lin engine::marginal_mean(const std::vector<std::pair<int, int>>& fixed, means_kind how, bool& ok) const {
    lin f;
    f.h = Eigen::VectorXd::Zero(ncols);
    double total = 0.0;
    ok = true;
    for (std::size_t cmb = 0; cmb < combos; ++cmb) {
        const std::vector<int> idx = idx_of(cmb);
        if (!matches(idx, fixed)) continue;
        double w = 1.0;
        if (how == means_kind::proportional) {
            if (observed[cmb] < 0) continue;
            w = cells[observed[cmb]].w;
        }
        const lin m = cell_mean(idx);
        f.h += w * m.h;
        total += w;
    }
    if (total == 0.0) {
        ok = false;
        return f;
    }
    f.h /= total;
    f.c = oy;
    return f;
}

void engine::observed_totals(const std::vector<std::pair<int, int>>& fixed, std::int64_t& rows,
                             double& w, double& mean, double& sd) const {
    rows = 0;
    w = 0.0;
    double sum = 0.0;
    for (const cell& c : cells)
        if (matches(c.idx, fixed)) rows += c.n, w += c.w, sum += c.w * c.m[p];
    mean = w > 0 ? oy + sum / w : nan;
    if (w == 0.0 || rows < 2) {
        sd = nan;
        return;
    }
    const double mu = sum / w;
    const int k = p + 2;
    double ss = 0.0;
    for (const cell& c : cells) {
        if (!matches(c.idx, fixed)) continue;
        // Within-cell SS of y: sum over factor rows of d_i rbar_i,y^2.
        const ddouble* d = s.cell_d(c.sc);
        const ddouble* rb = s.cell_rbar(c.sc);
        double wy = d[k - 1].value();
        for (int i = 1; i < k - 1; ++i) {
            const double r = rb[detail::rbar_index(k, i, k - 1)].value();
            wy += d[i].value() * r * r;
        }
        ss += wy + c.w * (c.m[p] - mu) * (c.m[p] - mu);
    }
    // As for one-factor levels: sum w (y - ybar_w)^2 / (n - 1), n the row count.
    sd = std::sqrt(ss / double(rows - 1));
}

/// One mean of a family: label and linear function (ok=false: no such mean).
struct family_mean {
    std::string label;
    lin f;
    bool ok = true;
};

class engine_family final : public mean_family {
public:
    engine_family(const engine& e, std::vector<family_mean> means, std::string reason)
        : e_(e), means_(std::move(means)), reason_(std::move(reason)) {}
    std::size_t size() const override { return means_.size(); }
    std::string label(std::size_t i) const override { return means_[i].label; }
    std::size_t find(const std::string& label, const char* option) const override {
        std::vector<std::string> labels;
        for (std::size_t i = 0; i < means_.size(); ++i) {
            if (means_[i].label == label) return i;
            labels.push_back(means_[i].label);
        }
        throw_unknown_level(option, label, labels);
    }
    lin combination(const Eigen::VectorXd& k, bool& ok) const {
        lin f;
        f.h = Eigen::VectorXd::Zero(e_.ncols);
        ok = true;
        for (std::size_t i = 0; i < means_.size(); ++i) {
            if (k[i] == 0.0) continue;
            ok = ok && means_[i].ok;
            f.h += k[i] * means_[i].f.h;
            f.c += k[i] * means_[i].f.c;
        }
        return f;
    }
    estimate combine(const Eigen::VectorXd& k) const override {
        bool ok = true;
        const lin f = combination(k, ok);
        if (!ok) return {nan, nan, false};
        return e_.evaluate(f);
    }
    double scaled_covariance(const Eigen::VectorXd& k1, const Eigen::VectorXd& k2) const override {
        bool ok = true;
        return e_.scaled_cov(combination(k1, ok).h, combination(k2, ok).h);
    }
    double df() const override { return e_.df_resid(); }
    double sigma2() const override { return e_.sigma2(); }
    std::string at_text() const override { return e_.at_text(); }
    std::string not_estimable_reason() const override { return reason_; }

private:
    const engine& e_;
    std::vector<family_mean> means_;
    std::string reason_;
};

const char* not_estimable_reason(const engine& e) {
    return e.empty_cells().empty() ? "an aliased covariate confounds it"
                                   : "it needs an empty cell that the model cannot fill in";
}

/// The family that pairs and contrasts compare: the marginal means of
/// factor= (default the first factor), or the cells (factor=cell), within the
/// levels `within` of other factors (for by=).
engine_family make_family(const engine& e, const std::vector<std::pair<int, int>>& within) {
    std::vector<family_mean> means;
    const bool cells = e.o.has_factor && e.o.factor == "cell";
    if (cells) {
        for (std::size_t c = 0; c < e.combos; ++c) {
            const std::vector<int> idx = e.idx_of(c);
            if (!e.matches(idx, within)) continue;
            family_mean m{e.cell_label(idx), e.cell_mean(idx), true};
            means.push_back(std::move(m));
        }
    } else {
        const int k = e.o.has_factor ? e.factor_index(e.o.factor, "factor") : 0;
        for (auto [wk, wl] : within)
            if (wk == k) throw error("options: by= must name a factor other than factor=");
        for (std::size_t l = 0; l < e.lv[k].size(); ++l) {
            auto fixed = within;
            fixed.emplace_back(k, int(l));
            family_mean m;
            m.label = e.lab[k][l];
            m.f = e.marginal_mean(fixed, e.o.means, m.ok);
            means.push_back(std::move(m));
        }
    }
    return engine_family(e, std::move(means), not_estimable_reason(e));
}

std::string weighting_name(const engine& e) { return means_name(e.o.means); }

/// The codings of each factor, for coefficients.
std::vector<coding> factor_codings(const engine& e) {
    if (e.o.coding == coding_kind::custom)
        throw error("options: coding=custom applies to one-factor models; crossed factors take "
                    "dummy, effect, weighted_effect, helmert, reverse_helmert, successive or "
                    "polynomial");
    int base_factor = -1;
    if (e.o.has_base) {
        for (int k = 0; k < e.K && base_factor < 0; ++k)
            for (const auto& l : e.lab[k])
                if (l == e.o.base) base_factor = k;
        if (base_factor < 0) {
            std::vector<std::string> all;
            for (int k = 0; k < e.K; ++k)
                for (const auto& l : e.lab[k]) all.push_back(e.fname[k] + ":" + l);
            throw_unknown_level("options: base", e.o.base, all);
        }
    }
    std::vector<coding> out;
    for (int k = 0; k < e.K; ++k) {
        coded_levels v;
        for (std::size_t l = 0; l < e.lv[k].size(); ++l) {
            v.levels.push_back(&e.lv[k][l]);
            v.labels.push_back(e.lab[k][l]);
            std::int64_t rows;
            double w, mean, sd;
            e.observed_totals({{k, int(l)}}, rows, w, mean, sd);
            v.weights.push_back(w);
        }
        v.covariates = e.p > 0;
        out.emplace_back(std::move(v), e.o, k == base_factor);
    }
    return out;
}

std::string intercept_words(const engine& e, int k) {
    switch (e.o.coding) {
    case coding_kind::dummy: {
        std::size_t base = 0;
        if (e.o.has_base)
            for (std::size_t l = 0; l < e.lab[k].size(); ++l)
                if (e.lab[k][l] == e.o.base) base = l;
        return e.fname[k] + " = " + e.lab[k][base];
    }
    case coding_kind::weighted_effect: return "weighted over " + e.fname[k];
    default: return "averaged over " + e.fname[k];
    }
}

}  // namespace

// ---------------------------------------------------------------------------

std::string encode_cross(const std::vector<level>& parts) {
    std::string out(cross_magic, sizeof cross_magic);
    out += static_cast<char>(parts.size());
    for (const level& l : parts) {
        out += static_cast<char>(l.kind);
        switch (l.kind) {
        case level_kind::integer: put_u64(out, static_cast<std::uint64_t>(l.i)); break;
        case level_kind::real: {
            std::uint64_t bits;
            std::memcpy(&bits, &l.r, sizeof bits);
            put_u64(out, bits);
            break;
        }
        default: {
            const std::uint32_t len = static_cast<std::uint32_t>(l.bytes.size());
            for (int b = 0; b < 4; ++b) out += static_cast<char>((len >> (8 * b)) & 0xff);
            out += l.bytes;
        }
        }
    }
    return out;
}

bool decode_cross(std::string_view bytes, std::vector<level>& parts) {
    parts.clear();
    const auto* p = reinterpret_cast<const unsigned char*>(bytes.data());
    std::size_t left = bytes.size();
    if (left < 5 || std::memcmp(p, cross_magic, 4) != 0) return false;
    const int count = p[4];
    if (count < 2 || count > max_factors) return false;
    p += 5, left -= 5;
    for (int i = 0; i < count; ++i) {
        if (left < 1) return false;
        const int kind = *p++;
        --left;
        if (kind == int(level_kind::integer) || kind == int(level_kind::real)) {
            if (left < 8) return false;
            const std::uint64_t bits = get_u64(p);
            p += 8, left -= 8;
            if (kind == int(level_kind::integer)) {
                parts.push_back(level::from_integer(static_cast<std::int64_t>(bits)));
            } else {
                double v;
                std::memcpy(&v, &bits, sizeof v);
                if (std::isnan(v)) return false;
                level l = level::from_real(v);
                if (l.kind != level_kind::real) return false;  // not canonical
                parts.push_back(l);
            }
        } else if (kind == int(level_kind::text) || kind == int(level_kind::blob)) {
            if (left < 4) return false;
            std::uint32_t len = 0;
            for (int b = 0; b < 4; ++b) len |= std::uint32_t(p[b]) << (8 * b);
            p += 4, left -= 4;
            if (left < len) return false;
            const std::string_view v(reinterpret_cast<const char*>(p), len);
            parts.push_back(kind == int(level_kind::text) ? level::from_text(v) : level::from_blob(v));
            p += len, left -= len;
        } else {
            return false;
        }
    }
    return left == 0;
}

namespace {
int arity_of(const level& l) {
    std::vector<level> parts;
    return l.kind == level_kind::blob && decode_cross(l.bytes, parts) ? int(parts.size()) : 0;
}
void arity_error(int arity, int k, const level& l) {
    if (arity == 0 || k == 0)
        throw error("the grouping mixes groupfit_cross cells with plain values (level " +
                    l.label() + "); give every row a groupfit_cross of the same factors");
    throw error("the grouping mixes groupfit_cross cells of " + std::to_string(std::min(arity, k)) +
                " and " + std::to_string(std::max(arity, k)) +
                " factors; give every row the same factors");
}
}  // namespace

void check_same_factors(const summary& s, std::size_t c) {
    const int a = arity_of(s.cell_level(0)), k = arity_of(s.cell_level(c));
    if (a != k) arity_error(a, k, s.cell_level(c));
}

int crossed_factors(const summary& s) {
    int arity = -1;
    for (std::size_t c = 0; c < s.cells(); ++c) {
        const level& l = s.cell_level(c);
        const int k = arity_of(l);
        if (arity >= 0 && k != arity) arity_error(arity, k, l);
        arity = k;
    }
    return std::max(arity, 0);
}

namespace {

/// The engine of a summary: crossed, or a one-factor model whose slopes vary.
engine make_engine(const summary& s, const options& o) { return engine(s, o, crossed_factors(s)); }

std::vector<value> test_row(const std::string& name, const char* method, int ss, double df,
                            double nominal, double ssv, double sse, double dfr, double sst) {
    const double mse = dfr > 0 ? sse / dfr : nan;
    std::string note;
    if (df < nominal)
        note = "tests " + shortest_real(df) + " of " + shortest_real(nominal) +
               " degrees of freedom: the rest are not estimable (empty cells or aliasing)";
    if (df <= 0) {
        return make_row(text(name), text(method), ss ? integer(ss) : value{}, num(0.0), num(dfr), num(0.0),
                value{}, value{}, value{}, value{}, value{}, value{},
                text(nominal > 0 ? "nothing testable: every degree of freedom is lost to empty cells or aliasing"
                                 : "the factor has one level: nothing to test"));
    }
    const double ms = ssv / df, fs = ms / mse;
    return make_row(text(name), text(method), ss ? integer(ss) : value{}, num(df), num(dfr), num(ssv),
                    num(ms), num(fs), num(dist::f_upper_p(fs, df, dfr)), num(ssv / sst),
                    num(ssv / (ssv + sse)), num((ssv - df * mse) / (sst + mse)),
                    note.empty() ? value{} : text(note));
}

/// SS and df of the homogeneity-of-slopes test: the full model against the
/// model with every covariate's slope also varying by level of the first
/// factor (df 0 when there is nothing to test).
struct homogeneity {
    double ss = 0, df = 0, nominal = 0, sse = 0, dfr = 0;
};

homogeneity slopes_test(const engine& small) {
    options wider = small.o;
    wider.slopes = slopes_kind::separate;
    const engine big(small.s, wider, small.plain ? 0 : small.K);
    homogeneity h;
    h.df = double(big.full.rank - small.full.rank);
    h.nominal = double(big.ncols - small.ncols);
    h.ss = std::max(0.0, small.full.sse - big.full.sse);
    h.sse = big.full.sse;
    h.dfr = double(big.n) - big.full.rank;
    return h;
}

}  // namespace

std::vector<value> slopes_homogeneity_row(const fit& f) {
    const summary& s = f.data();
    if (s.covariates() == 0) return {};
    // With one factor, slopes by level are slopes by cell: the separate-slopes
    // model's residual is the sum of the cells' own residuals of y on the
    // covariates, which the cell factors already hold (the last D entry), and
    // its rank counts each cell's intercept and non-degenerate covariates.
    // The common-slopes model is the fit itself. O(cells x p^2), no design
    // matrix (so 10,000 levels cost what 100 do, per level).
    homogeneity h;
    const int k = s.width();
    double sse_sep = 0.0;
    int rank_sep = 0;
    for (std::size_t c = 0; c < s.cells(); ++c) {
        const ddouble* d = s.cell_d(c);
        const ddouble* rb = s.cell_rbar(c);
        rank_sep += 1;
        for (int j = 1; j < k - 1; ++j) {
            // Column j's within-cell sum of squares: d_j + sum_{i<j} d_i rbar_ij^2.
            double norm2 = d[j].value();
            for (int i = 1; i < j; ++i) {
                const double r = rb[detail::rbar_index(k, i, j)].value();
                norm2 += d[i].value() * r * r;
            }
            if (norm2 > 0 && d[j].value() > rank_tolerance * rank_tolerance * norm2) ++rank_sep;
        }
        sse_sep += d[k - 1].value();
    }
    const int p = f.covariates();
    h.df = double(rank_sep - f.rank());
    h.nominal = double(p) * double(s.cells() - 1);
    h.ss = std::max(0.0, f.sse() - sse_sep);
    h.sse = sse_sep;
    h.dfr = double(f.rows()) - rank_sep;
    std::string name = f.group_name() + " \u00d7 " + (p == 1 ? f.covariate_name(0) : std::string("covariates"));
    return test_row(name, "homogeneity_of_slopes", 0, h.df, h.nominal, h.ss, h.sse, h.dfr, f.ss_total());
}

table cross_tests_report(const summary& s, const options& o) {
    const int crossed = crossed_factors(s);
    const engine e(s, o, crossed);
    table t{tests_columns(), {}};
    const double sse = e.full.sse, dfr = e.df_resid(), sst = e.ss_total();
    const std::size_t T = e.terms.size();
    for (std::size_t i = 0; i < T; ++i) {
        const term& tm = e.terms[i];
        std::vector<bool> drop_with(T, false), drop_without(T, false);
        if (o.ss == 1) {
            for (std::size_t j = i; j < T; ++j) drop_with[j] = true;
            for (std::size_t j = i + 1; j < T; ++j) drop_without[j] = true;
        } else if (o.ss == 2) {
            for (std::size_t j = 0; j < T; ++j)
                if (j == i || e.terms[j].contains(tm)) drop_with[j] = true;
            for (std::size_t j = 0; j < T; ++j)
                if (e.terms[j].contains(tm)) drop_without[j] = true;
        } else {
            drop_with[i] = true;
        }
        const solution a = e.solve(e.columns_without(drop_with));
        const solution b = e.solve(e.columns_without(drop_without));
        const double df = double(b.rank - a.rank);
        t.rows.push_back(test_row(tm.name, "f_test", o.ss, df, double(tm.ncols),
                                  std::max(0.0, a.sse - b.sse), sse, dfr, sst));
    }
    if (e.p > 0 && o.slopes == slopes_kind::common) {
        const homogeneity h = slopes_test(e);
        const std::string name =
            e.fname[0] + " \u00d7 " + (e.p == 1 ? e.cname[0] : std::string("covariates"));
        t.rows.push_back(test_row(name, "homogeneity_of_slopes", 0, h.df, h.nominal, h.ss, h.sse,
                                  h.dfr, sst));
    }
    const double dfm = double(e.full.rank - 1);
    if (dfm > 0) {
        const double ssm = std::max(0.0, sst - sse);
        std::vector<value> row = test_row("model", "f_test", 0, dfm, dfm, ssm, sse, dfr, sst);
        row[10] = num(ssm / sst);  // partial eta squared of the model is its eta squared
        t.rows.push_back(row);
    }
    std::vector<value> res(tests_columns().size());
    res[0] = text("residual"), res[3] = num(dfr), res[5] = num(sse), res[6] = num(e.sigma2());
    t.rows.push_back(res);
    std::vector<value> tot(tests_columns().size());
    tot[0] = text("total"), tot[3] = num(double(e.n - 1)), tot[5] = num(sst);
    t.rows.push_back(tot);
    return t;
}

table cross_levels_report(const summary& s, const options& o) {
    const engine e = make_engine(s, o);
    table t{levels_columns(), {}};
    const double df = e.df_resid();
    const double q = dist::t_quantile(1.0 - (1.0 - o.conf) / 2.0, df);
    const std::string at = e.at_text();
    auto add = [&](const std::string& term, const std::string& label, std::int64_t pos,
                   const std::vector<std::pair<int, int>>& fixed, const lin* f, bool ok,
                   value weighting, const std::string& why) {
        std::int64_t rows;
        double w, mean, sd;
        e.observed_totals(fixed, rows, w, mean, sd);
        estimate est{nan, nan, false};
        if (ok && f) est = e.evaluate(*f);
        std::string note;
        if (rows == 0) note = "empty cell";
        if (!est.estimable)
            note += (note.empty() ? "" : "; ") + std::string("adjusted mean not estimable: ") + why;
        const bool has_se = est.estimable && !std::isnan(est.std_error);
        t.rows.push_back(make_row(text(term), text(label), integer(pos), integer(rows), num(w),
                          rows ? num(mean) : value{}, num(sd),
                          est.estimable ? num(est.value) : value{},
                          has_se ? num(est.std_error) : value{},
                          has_se ? num(est.value - q * est.std_error) : value{},
                          has_se ? num(est.value + q * est.std_error) : value{}, std::move(weighting),
                          at.empty() ? value{} : text(at), note.empty() ? value{} : text(note)));
    };
    const std::string why = not_estimable_reason(e);
    // Cells (every combination, empty ones included), then each factor's
    // marginal means.
    if (e.K > 1) {
        std::vector<std::string> all;
        for (int k = 0; k < e.K; ++k) all.push_back(e.fname[k]);
        for (std::size_t c = 0; c < e.combos; ++c) {
            const std::vector<int> idx = e.idx_of(c);
            std::vector<std::pair<int, int>> fixed;
            for (int k = 0; k < e.K; ++k) fixed.emplace_back(k, idx[k]);
            const lin f = e.cell_mean(idx);
            add(join(all, " \u00d7 "), e.cell_label(idx), std::int64_t(c + 1), fixed, &f, true,
                value{}, why);
        }
    }
    for (int k = 0; k < e.K; ++k)
        for (std::size_t l = 0; l < e.lv[k].size(); ++l) {
            bool ok = true;
            const lin f = e.marginal_mean({{k, int(l)}}, o.means, ok);
            add(e.fname[k], e.lab[k][l], std::int64_t(l + 1), {{k, int(l)}}, &f, ok,
                e.K > 1 ? text(weighting_name(e)) : value{}, why);
        }
    return t;
}

table cross_coef_report(const summary& s, const options& o) {
    const engine e = make_engine(s, o);
    const std::vector<coding> cd = factor_codings(e);
    table t{coef_columns(), {}};
    const double df = e.df_resid();
    const double q = dist::t_quantile(1.0 - (1.0 - o.conf) / 2.0, df);
    const std::string why = not_estimable_reason(e);
    auto add = [&](const std::string& term, const std::string& label, const std::string& words,
                   const lin& f) {
        const estimate est = e.evaluate(f);
        const bool has_se = est.estimable && !std::isnan(est.std_error) && est.std_error > 0;
        const double tv = has_se ? est.value / est.std_error : nan;
        t.rows.push_back(make_row(text(term), text(label), text(words),
                          est.estimable ? num(est.value) : value{},
                          est.estimable ? num(est.std_error) : value{}, num(tv),
                          df > 0 ? num(df) : value{},
                          has_se ? num(dist::t_two_sided_p(tv, df)) : value{},
                          has_se ? num(est.value - q * est.std_error) : value{},
                          has_se ? num(est.value + q * est.std_error) : value{},
                          est.estimable ? value{} : text("not estimable: " + why)));
    };
    // Coefficient rows: for every term of the model (and the intercept), every
    // combination of non-intercept coding rows of its factors. Its weights
    // over the cells are the Kronecker product of the factors' coding rows;
    // the cell means are taken where every covariate is 0.
    std::vector<unsigned> masks{0u};
    for (const term& tm : e.terms)
        if (tm.cov < 0) masks.push_back(tm.mask);
    std::vector<Eigen::MatrixXd> rows(e.K);
    for (int k = 0; k < e.K; ++k) {
        rows[k].resize(cd[k].size(), e.lv[k].size());
        for (std::size_t i = 0; i < cd[k].size(); ++i) rows[k].row(i) = cd[k].row(i).transpose();
    }
    std::vector<lin> cellf(e.combos);
    const Eigen::VectorXd zero = Eigen::VectorXd::Zero(e.p);
    for (std::size_t c = 0; c < e.combos; ++c) cellf[c] = e.cell_mean_at(e.idx_of(c), zero);
    const std::string at0 = e.p > 0 ? " where every covariate is 0" : "";
    for (unsigned mask : masks) {
        std::vector<int> in;
        for (int k = 0; k < e.K; ++k)
            if (mask >> k & 1u) in.push_back(k);
        std::vector<std::size_t> pick(in.size(), 1);
        bool more = true;
        for (const int k : in)
            if (cd[k].size() < 2) more = false;
        while (more) {
            std::vector<std::size_t> row_of(e.K, 0);
            for (std::size_t a = 0; a < in.size(); ++a) row_of[in[a]] = pick[a];
            lin f;
            f.h = Eigen::VectorXd::Zero(e.ncols);
            for (std::size_t c = 0; c < e.combos; ++c) {
                const std::vector<int> idx = e.idx_of(c);
                double w = 1.0;
                for (int k = 0; k < e.K && w != 0.0; ++k) w *= rows[k](row_of[k], idx[k]);
                if (w == 0.0) continue;
                f.h += w * cellf[c].h;
                f.c += w * cellf[c].c;
            }
            std::vector<std::string> labels, words;
            for (const int k : in) {
                const std::size_t r = row_of[k];
                labels.push_back(cd[k].label(r));
                words.push_back(cd[k].compares(r));
            }
            std::vector<std::string> ctx;
            for (int k = 0; k < e.K; ++k)
                if (!(mask >> k & 1u)) ctx.push_back(intercept_words(e, k));
            std::string w;
            if (in.empty()) w = "mean of the cell where " + join(ctx, ", ") + at0;
            else if (in.size() == 1) w = words[0] + (ctx.empty() ? "" : " (" + join(ctx, ", ") + ")");
            else w = "interaction: (" + join(words, ") by (") + ")";
            if (in.empty() && e.o.coding != coding_kind::dummy)
                w = "mean of all cells (" + join(ctx, ", ") + ")" + at0;
            add(in.empty() ? "intercept" : e.mask_name(mask), in.empty() ? "intercept" : join(labels, "/"),
                w, f);
            // Next combination of coding rows (last factor fastest).
            std::size_t a = in.size();
            more = false;
            while (a-- > 0) {
                if (++pick[a] < cd[in[a]].size()) {
                    more = true;
                    break;
                }
                pick[a] = 1;
            }
        }
    }
    // Slopes: common, or one per level of the first factor, or one per cell.
    for (int j = 0; j < e.p; ++j) {
        std::vector<std::pair<std::string, std::vector<int>>> groups;
        if (o.slopes == slopes_kind::common) groups.push_back({"slope", {}});
        else if (o.slopes == slopes_kind::separate)
            for (std::size_t l = 0; l < e.lv[0].size(); ++l)
                groups.push_back({"slope in " + e.lab[0][l], {int(l)}});
        else
            for (std::size_t c = 0; c < e.combos; ++c) {
                const std::vector<int> idx = e.idx_of(c);
                groups.push_back({"slope in " + e.cell_label(idx), idx});
            }
        for (const auto& [label, idx] : groups) {
            lin f;
            f.h = Eigen::VectorXd::Zero(e.ncols);
            std::vector<int> full_idx = idx;
            full_idx.resize(e.K, 0);
            for (const term& tm : e.terms) {
                if (tm.cov != j) continue;
                if (tm.mask == 0) f.h[tm.first] = 1.0;
                else e.basis(tm.mask, full_idx, 1.0, f.h.data() + tm.first);
            }
            add(e.cname[j], label,
                "change in the mean per unit of " + e.cname[j] +
                    (idx.empty() ? std::string() : " in " + label.substr(9)),
                f);
        }
    }
    return t;
}

table cross_summary_report(const summary& s, const options& o) {
    const engine e = make_engine(s, o);
    table t{summary_columns(), {}};
    const double n = double(e.n);
    const double sse = e.full.sse, sst = e.ss_total();
    const double dfm = double(e.full.rank - 1), dfr = e.df_resid();
    const double r2 = (sst - sse) / sst;
    const double adj = dfr > 0 ? 1.0 - (1.0 - r2) * (n - 1) / dfr : nan;
    const double fs = ((sst - sse) / dfm) / e.sigma2();
    double log_w = 0;
    for (std::size_t c = 0; c < s.cells(); ++c) log_w += s.cell_log_weight(c);
    const double ll = 0.5 * log_w - 0.5 * n * (std::log(2 * M_PI) + 1.0 - std::log(n) + std::log(sse));
    const double kpar = double(e.full.rank + 1);
    const std::vector<std::string> empty = e.empty_cells();
    std::string aliased;
    if (e.full.rank < int(e.ncols))
        aliased = std::to_string(e.ncols - e.full.rank) + " of " + std::to_string(e.ncols) +
                  " design columns aliased" + (empty.empty() ? "" : " (empty cells)");
    t.rows.push_back(make_row(integer(s.rows_used()), integer(s.dropped_total()),
                      integer(s.dropped(drop_reason::null_response)),
                      integer(s.dropped(drop_reason::null_group)),
                      integer(s.dropped(drop_reason::null_covariate)),
                      integer(s.dropped(drop_reason::null_weight)),
                      integer(s.dropped(drop_reason::zero_weight)), num(e.wsum),
                      integer(std::int64_t(e.cells.size())), integer(e.p),
                      integer(std::int64_t(e.ncols)), integer(e.full.rank),
                      aliased.empty() ? value{} : text(aliased), num(dfm), num(dfr), num(r2),
                      num(adj), num(std::sqrt(e.sigma2())), dfm > 0 ? num(fs) : value{},
                      dfm > 0 ? num(dist::f_upper_p(fs, dfm, dfr)) : value{}, num(ll),
                      num(-2 * ll + 2 * kpar), num(-2 * ll + std::log(n) * kpar), value{},
                      integer(e.plain ? 1 : e.K), integer(std::int64_t(empty.size())),
                      empty.empty() ? value{} : text(label_list(empty)),
                      text(std::string("terms=") + terms_name(o.terms) + "; slopes=" +
                           slopes_name(o.slopes))));
    return t;
}

table cross_deviations_report(const summary& s, const options& o) {
    (void)make_engine(s, o);
    throw error("groupfit_deviations applies to one-factor models with common slopes; for crossed "
                "factors use groupfit_levels (marginal means) and groupfit_contrast");
}

table cross_pairs_report(const summary& s, const options& o) {
    const engine e = make_engine(s, o);
    table t{pairs_columns(), {}};
    if (!o.has_by) {
        pairs_rows(make_family(e, {}), o, std::string(), t);
        return t;
    }
    if (o.has_factor && o.factor == "cell")
        throw error("options: by= compares levels of factor= within levels of another factor; it "
                    "cannot be combined with factor=cell");
    const int b = e.factor_index(o.by, "by");
    if (e.K < 2) throw error("options: by= needs crossed factors (groupfit_cross)");
    for (std::size_t l = 0; l < e.lv[b].size(); ++l)
        pairs_rows(make_family(e, {{b, int(l)}}), o, e.fname[b] + "=" + e.lab[b][l], t);
    return t;
}

table cross_contrast_report(const summary& s, const options& o, std::string_view weights) {
    const engine e = make_engine(s, o);
    if (o.has_by) throw error("options: by= applies to groupfit_pairs");
    return contrast_report(make_family(e, {}), o, weights);
}

}  // namespace groupfit
