// Comparisons from the fitted model (core/compare.hpp): pairs_report and
// contrast_report against R, plus the definitions' own consequences.
//
// Sources of expected values (each check names its source in its message):
// * tests/oracle/golden/pairs_<dataset>.csv, written by
//   tests/oracle/make_pairs_golden.R with R 4.2.2, multcomp 1.4.22 and mvtnorm
//   1.1.3: multcomp::glht on lm (mcp with our comparison rows, Dunnett on the
//   relevelled factor, manual L b for contrasts, Ftest for the joint row),
//   ptukey / TukeyHSD for Tukey-Kramer, pf for Scheffe, p.adjust for BH,
//   1 - (1 - p)^m for Sidak, pmvt for Dunnett (and an adaptive-quadrature
//   Dunnett (1955) product-form integral for designs without covariates).
//   Every golden row names its R function in its `source` column; the message
//   of a failed check repeats it. Every golden row must be matched by a check,
//   and a missing golden file is a failure.
// * tests/oracle/golden/pairs_padjust.csv: stats::p.adjust on fixed vectors,
//   against groupfit::detail::holm and detail::benjamini_hochberg.
// * Identities stated in core/compare.hpp (interval excludes 0 iff the
//   adjusted p-value is below 1 - conf for simultaneous methods; comparisons
//   do not depend on at=), and of least squares (a covariate constant within
//   levels spans nothing new: the comparisons that stay estimable equal those
//   of the model without it).
// * Error texts: core/options.cpp, core/compare.cpp and core/fit.cpp.
//
// Tolerances (besides the golden r_error, the reference's own stated error):
//   estimate, std_error, t_stat, contrast rows, F: 1e-9 relative (estimates
//     and t also 1e-12 of the largest level mean absolute: differences of
//     means carry the rounding of the means);
//   p-values: 1e-9 relative or 1e-15 absolute, plus r_error, plus our own
//     stated p error for Dunnett (the "p error <= X" in the method column);
//   interval ends: 1e-9 relative plus r_error plus our critical value's error
//     times the standard error (Dunnett: max(stated p error, 1e-5 -- the
//     default QMC tolerance of dist::dunnett_quantile in core/multcomp.hpp)
//     divided by the density at the critical value, from the golden file;
//     Tukey: 1e-8 relative, the tested accuracy of dist::srange_quantile).
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <functional>
#include <limits>
#include <map>
#include <memory>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "compare.hpp"
#include "error.hpp"
#include "fit.hpp"
#include "level.hpp"
#include "options.hpp"
#include "report.hpp"
#include "summary.hpp"
#include "golden_csv.hpp"

namespace fs = std::filesystem;
using namespace groupfit;

namespace {

constexpr const char* kScript = "tests/oracle/make_pairs_golden.R";
const std::vector<std::string> kVersions = {"R version 4.2.2", "multcomp 1.4.22", "mvtnorm 1.1.3"};
constexpr const char* kIdentity = "identity (core/compare.hpp header)";

const fs::path kRoot = GROUPFIT_SOURCE_DIR;
const fs::path kGoldenDir = kRoot / "tests" / "oracle" / "golden";

// The golden files the generator writes; each must be present.
const std::vector<std::string> kDatasets = {"plantgrowth", "insectsprays",    "chickwts",  "iris",
                                            "mtcars",      "mtcars_weighted", "deliveries"};

const double inf = std::numeric_limits<double>::infinity();

// CSV, files, numbers and text, and MD5 (the golden header pins the data file
// it was computed from) come from golden_csv.hpp.
using namespace gf_golden;

// Golden value: a finite number, Inf, -Inf or NA (NaN).
bool parse_golden_value(const std::string& s, double& v) {
    if (s == "Inf") return v = inf, true;
    if (s == "-Inf") return v = -inf, true;
    if (s == "NA") return v = NAN, true;
    return parse_double(s, v);
}

// ---------------------------------------------------------------------------
// Golden files
// ---------------------------------------------------------------------------
struct golden_row {
    std::string report, options, weights, level_a, level_b, row, quantity, text, source;
    double value = NAN, r_error = 0;
    int line = 0;
};

struct golden_file : golden_header {
    std::string name;
    std::vector<golden_row> rows;
};

std::string load_golden(const fs::path& path, golden_file& g, bool needs_data) {
    std::string body;
    if (!read_file(path, body)) return "cannot read " + path.string();
    g.name = path.stem().string();
    std::string csv;
    if (std::string e = parse_golden_header(body, g, csv); !e.empty()) return e;
    if (needs_data && (g.data_path.empty() || g.response.empty() || g.group.empty() || g.levels.empty()))
        return "header line 2 lacks data:, model: or levels: " + g.header2;

    const auto rows = parse_csv(csv);
    const std::vector<std::string> want = {"dataset", "report", "options", "weights",
                                           "level_a", "level_b", "row",    "quantity",
                                           "value",   "r_error", "source"};
    if (rows.empty() || rows[0].size() != want.size()) return "unexpected CSV header";
    for (std::size_t i = 0; i < want.size(); ++i)
        if (rows[0][i].text != want[i]) return "unexpected CSV header column " + rows[0][i].text;
    for (std::size_t r = 1; r < rows.size(); ++r) {
        const auto& f = rows[r];
        if (f.size() != want.size())
            return "data row " + std::to_string(r) + " has " + std::to_string(f.size()) + " fields";
        golden_row gr{f[1].text, f[2].text, f[3].text, f[4].text, f[5].text,
                      f[6].text, f[7].text, f[8].text, f[10].text};
        gr.line = int(r + g.comment_lines + 1);
        const std::string expect_name = g.name.substr(std::string("pairs_").size());
        if (f[0].text != expect_name)
            return "line " + std::to_string(gr.line) + " names dataset '" + f[0].text + "'";
        if (!parse_golden_value(gr.text, gr.value))
            return "line " + std::to_string(gr.line) + ": value '" + gr.text + "' is not a number";
        if (!parse_double(f[9].text, gr.r_error) || gr.r_error < 0)
            return "line " + std::to_string(gr.line) + ": bad r_error '" + f[9].text + "'";
        if (gr.source.empty()) return "line " + std::to_string(gr.line) + " names no source";
        g.rows.push_back(std::move(gr));
    }
    if (g.rows.empty()) return "no data rows";
    return {};
}

// Reads the data file named in the header into a summary (complete cases).
std::string load_data(const golden_file& g, summary& s) {
    const fs::path path = kRoot / g.data_path;
    std::string body;
    if (!read_file(path, body)) return "cannot read the data file " + path.string();
    if (!g.md5.empty() && md5_hex(body) != g.md5)
        return path.string() + " has md5 " + md5_hex(body) + " but the golden values were computed from md5 " +
               g.md5 + "; regenerate with Rscript " + kScript;
    const auto rows = parse_csv(body);
    if (rows.empty()) return "empty data file " + path.string();
    auto column = [&](const std::string& name) -> int {
        for (std::size_t i = 0; i < rows[0].size(); ++i)
            if (rows[0][i].text == name) return int(i);
        return -1;
    };
    const int cy = column(g.response), cg = column(g.group);
    const int cw = g.weight.empty() ? -2 : column(g.weight);
    std::vector<int> cx;
    for (const auto& x : g.covariates) cx.push_back(column(x));
    if (cy < 0 || cg < 0 || cw == -1 || std::count(cx.begin(), cx.end(), -1))
        return "a model column is missing from " + path.string();
    bool numeric_group = true;
    for (std::size_t r = 1; r < rows.size(); ++r) {
        if (rows[r].size() != rows[0].size()) return path.string() + ": ragged row " + std::to_string(r);
        double v;
        if (!rows[r][cg].text.empty() && !parse_double(rows[r][cg].text, v)) numeric_group = false;
    }
    const int p = int(g.covariates.size());
    s = summary(p, !g.weight.empty());
    limits lim;
    std::vector<double> vals(p + 1);
    for (std::size_t r = 1; r < rows.size(); ++r) {
        const auto& f = rows[r];
        auto num = [&](int c, double& v) { return !f[c].text.empty() && parse_double(f[c].text, v); };
        if (f[cy].text.empty()) { s.drop(drop_reason::null_response); continue; }
        if (f[cg].text.empty()) { s.drop(drop_reason::null_group); continue; }
        if (!num(cy, vals[p])) return path.string() + ": bad response in row " + std::to_string(r);
        bool null_x = false;
        for (int j = 0; j < p && !null_x; ++j) {
            if (f[cx[j]].text.empty()) null_x = true;
            else if (!num(cx[j], vals[j])) return path.string() + ": bad covariate in row " + std::to_string(r);
        }
        if (null_x) { s.drop(drop_reason::null_covariate); continue; }
        double w = 1.0;
        if (cw >= 0) {
            if (f[cw].text.empty()) { s.drop(drop_reason::null_weight); continue; }
            if (!num(cw, w) || !(w > 0)) return path.string() + ": bad weight in row " + std::to_string(r);
        }
        level lv;
        if (numeric_group) {
            double gv = 0;
            parse_double(f[cg].text, gv);
            lv = level::from_real(gv);
        } else {
            lv = level::from_text(f[cg].text);
        }
        s.add_row(s.cell_for(lv, lim), vals.data(), w);
    }
    return {};
}

// ---------------------------------------------------------------------------
// Report tables
// ---------------------------------------------------------------------------
int col(const table& t, const std::string& name) {
    for (std::size_t i = 0; i < t.columns.size(); ++i)
        if (t.columns[i] == name) return int(i);
    ADD_FAILURE() << "report has no column '" << name << "'";
    return -1;
}

double real_of(const value& v) {
    if (auto d = std::get_if<double>(&v)) return *d;
    if (auto i = std::get_if<std::int64_t>(&v)) return double(*i);
    return NAN;
}
bool is_null(const value& v) { return std::holds_alternative<std::monostate>(v); }
std::string text_of(const value& v) {
    if (auto s = std::get_if<std::string>(&v)) return *s;
    return {};
}
double cell(const table& t, std::size_t row, const std::string& column) {
    const int c = col(t, column);
    if (c < 0 || row >= t.rows.size()) return NAN;
    return real_of(t.rows[row][c]);
}
std::string cell_text(const table& t, std::size_t row, const std::string& column) {
    const int c = col(t, column);
    if (c < 0 || row >= t.rows.size()) return {};
    return text_of(t.rows[row][c]);
}

// "p error <= X" in a Dunnett method string; 0 when absent.
double stated_p_error(const std::string& method) {
    const auto at = method.find("p error <= ");
    if (at == std::string::npos) return 0.0;
    return std::strtod(method.c_str() + at + 11, nullptr);
}

// ---------------------------------------------------------------------------
// Bookkeeping of the comparisons with each source
// ---------------------------------------------------------------------------
struct stat_entry {
    long count = 0;
    double max_abs = 0, max_rel = 0, max_use = 0;
    std::string where_abs;
};
std::map<std::string, stat_entry>& stats() {
    static std::map<std::string, stat_entry> m;
    return m;
}
long& total_checks() {
    static long n = 0;
    return n;
}

void record(const std::string& key, double ours, double ref, double tol, const std::string& where) {
    auto& e = stats()[key];
    ++e.count;
    ++total_checks();
    if (std::isfinite(ours) && std::isfinite(ref)) {
        const double d = std::fabs(ours - ref);
        if (d > e.max_abs) e.max_abs = d, e.where_abs = where;
        if (ref != 0) e.max_rel = std::max(e.max_rel, d / std::fabs(ref));
        if (tol > 0) e.max_use = std::max(e.max_use, d / tol);
    } else if (!(std::isinf(ours) && ours == ref)) {
        e.max_use = inf;
    }
}

// Short name of a golden source for the summary table.
std::string source_key(const std::string& src) {
    static const std::vector<std::pair<const char*, const char*>> prefixes = {
        {"multcomp::glht(lm, mcp", "multcomp glht (mcp K)"},
        {"multcomp::glht(lm, linfct = L)", "multcomp glht (L b)"},
        {"multcomp summary(glht(lm, linfct = L), test = Ftest", "multcomp Ftest"},
        {"multcomp summary(glht(lm, mcp(g = K)), test = adjusted(\"single-step\")",
         "multcomp single-step all pairs (pmvt)"},
        {"multcomp summary(glht, test = adjusted(\"single-step\")", "multcomp single-step Dunnett (pmvt)"},
        {"multcomp summary(glht, test = adjusted(\"bonferroni\")", "multcomp adjusted(bonferroni)"},
        {"multcomp summary(glht, test = adjusted(\"holm\")", "multcomp adjusted(holm)"},
        {"multcomp confint", "multcomp confint (univariate)"},
        {"confint(glht, calpha = c)", "confint at the pmvt root"},
        {"confint(glht", "confint(glht, calpha = R quantile)"},
        {"ptukey", "ptukey"},
        {"stats::TukeyHSD", "TukeyHSD"},
        {"Dunnett (1955)", "Dunnett product-form quadrature"},
        {"pf(", "pf (Scheffe)"},
        {"p.adjust(pt tail p, method = \"BH\")", "p.adjust BH"},
        {"stats::p.adjust(pt tail p, method = \"bonferroni\")", "p.adjust bonferroni"},
        {"stats::p.adjust(pt tail p, method = \"holm\")", "p.adjust holm"},
        {"1 - (1 - p)^m", "Sidak formula"},
        {"stats::p.adjust(p, method", "p.adjust (fixed vectors)"},
        {"stats::pt", "stats::pt tail"},
    };
    for (const auto& [pre, key] : prefixes)
        if (starts_with(src, pre)) return key;
    return src.substr(0, 40);
}

struct checker {
    std::string where_prefix;

    std::string where(const golden_row& r) const {
        std::string w = where_prefix + " line " + std::to_string(r.line) + " [" + r.options + "]";
        if (!r.weights.empty()) w += " weights '" + r.weights + "'";
        if (!r.level_a.empty()) w += " " + r.level_a + " vs " + r.level_b;
        if (!r.row.empty()) w += " row " + r.row;
        return w + " " + r.quantity;
    }

    // |ours - R| <= tol; infinite values must be equal.
    void close(const golden_row& r, double ours, double tol, const std::string& kind) {
        const std::string w = where(r);
        record(kind + " vs " + source_key(r.source), ours, r.value, tol, w);
        if (std::isinf(r.value) || std::isinf(ours)) {
            EXPECT_EQ(ours, r.value) << w << ": ours " << fmt17(ours) << ", R's " << r.text
                                     << " (source: " << r.source << ")";
            return;
        }
        const double d = std::fabs(ours - r.value);
        EXPECT_TRUE(std::isfinite(ours) && d <= tol)
            << w << ": ours " << fmt17(ours) << ", R's " << fmt17(r.value) << " (|diff| " << d
            << ", tolerance " << tol << "; source: " << r.source << ", via " << kScript << ")";
    }

    // ours >= R - tol (sign = +1) or ours <= R + tol (sign = -1).
    void bound(const golden_row& r, double ours, double tol, int sign, const std::string& kind) {
        const std::string w = where(r);
        auto& e = stats()[kind + " vs " + source_key(r.source)];
        ++e.count;
        ++total_checks();
        const bool ok = std::isfinite(ours) && (sign > 0 ? ours >= r.value - tol : ours <= r.value + tol);
        EXPECT_TRUE(ok) << w << ": ours " << fmt17(ours) << " must be " << (sign > 0 ? ">=" : "<=")
                        << " R's " << fmt17(r.value) << (sign > 0 ? " - " : " + ") << tol
                        << " (Tukey-Kramer is conservative, Hayter 1984; source: " << r.source << ")";
    }
};

// A p-value: 1e-9 relative or 1e-15 absolute, plus the extra error; a positive
// reference must stay positive here (no underflow hidden under the floor).
double p_tol(double ref, double extra) { return std::max(1e-9 * std::fabs(ref), 1e-15) + extra; }

// ---------------------------------------------------------------------------
// Consistency of intervals and adjusted p-values (core/compare.hpp: "In every
// simultaneous method the interval excludes 0 exactly when the adjusted
// p-value is below 1 - conf").
// ---------------------------------------------------------------------------
long check_consistency(const table& t, const options& o, const std::string& where) {
    const bool simultaneous = o.adjust == adjust_kind::bonferroni || o.adjust == adjust_kind::sidak ||
                              o.adjust == adjust_kind::tukey || o.adjust == adjust_kind::scheffe ||
                              o.adjust == adjust_kind::dunnett;
    const bool per_comparison = o.adjust == adjust_kind::none;
    long checked = 0;
    for (std::size_t r = 0; r < t.rows.size(); ++r) {
        const std::string interval = cell_text(t, r, "interval");
        if (o.adjust == adjust_kind::holm || o.adjust == adjust_kind::bh) {
            EXPECT_NE(interval.find("not simultaneous"), std::string::npos)
                << where << " row " << r << ": holm/bh intervals must be labelled not simultaneous ('"
                << interval << "'; core/compare.hpp)";
            continue;
        }
        EXPECT_EQ(interval, simultaneous ? "simultaneous" : "per comparison")
            << where << " row " << r << " (core/compare.cpp)";
        const double p = cell(t, r, "p_adjusted"), lo = cell(t, r, "ci_lower"), hi = cell(t, r, "ci_upper");
        if (std::isnan(p)) continue;
        EXPECT_TRUE(!std::isnan(lo) && !std::isnan(hi)) << where << " row " << r << ": p but no interval";
        if (!simultaneous && !per_comparison) continue;
        const double alpha = 1.0 - o.conf;
        // Near the boundary the two sides are computed by different routines
        // (p-value vs quantile); Dunnett's QMC has its stated error and the
        // 1e-5 default tolerance of the quantile.
        const double margin = o.adjust == adjust_kind::dunnett
                                  ? 1e-5 + stated_p_error(cell_text(t, r, "method")) + 1e-9
                                  : 1e-9;
        if (std::fabs(p - alpha) <= margin) continue;
        const bool excludes = lo > 0 || hi < 0;
        EXPECT_EQ(excludes, p < alpha)
            << where << " row " << r << ": interval [" << fmt17(lo) << ", " << fmt17(hi)
            << "] and p_adjusted " << fmt17(p) << " at conf " << o.conf << " (" << kIdentity << ")";
        ++checked;
        ++total_checks();
        ++stats()["consistency (interval vs p_adjusted)"].count;
    }
    return checked;
}

// ---------------------------------------------------------------------------
// The golden-driven test: one case per dataset
// ---------------------------------------------------------------------------
std::string names_option(const golden_file& g) {
    std::string s = "names=" + g.group;
    for (const auto& x : g.covariates) s += ", " + x;
    return s;
}

class PairsGolden : public ::testing::TestWithParam<std::string> {};

TEST_P(PairsGolden, MatchesR) {
    const std::string name = GetParam();
    const fs::path path = kGoldenDir / ("pairs_" + name + ".csv");
    ASSERT_TRUE(fs::exists(path)) << "golden file missing: " << path << " (regenerate with Rscript "
                                  << kScript << ")";
    golden_file g;
    {
        const std::string e = load_golden(path, g, true);
        ASSERT_TRUE(e.empty()) << path << ": " << e;
    }
    for (const auto& v : kVersions)
        ASSERT_NE(g.header1.find(v), std::string::npos) << path << ": header must record " << v;
    summary s;
    {
        const std::string e = load_data(g, s);
        ASSERT_TRUE(e.empty()) << e;
    }
    ASSERT_EQ(s.rows_used(), g.rows_used) << name << ": rows used (golden header)";
    const int p = int(g.covariates.size());
    const std::string names = names_option(g);

    // Level order and a scale for absolute floors (largest |level mean|).
    double ymag = 0;
    {
        fit f0(s, parse_options(names));
        ASSERT_EQ(f0.levels(), g.levels.size());
        for (std::size_t i = 0; i < f0.levels(); ++i) {
            EXPECT_EQ(f0.level_label(i), g.levels[i]) << name << ": level order (golden header)";
            ymag = std::max(ymag, std::fabs(f0.level_mean(i)));
        }
    }
    const double est_floor = 1e-12 * ymag;

    // Group the golden rows by report, options and weights (file order).
    std::vector<std::string> order;
    std::map<std::string, std::vector<const golden_row*>> groups;
    for (const auto& r : g.rows) {
        const std::string key = r.report + '\x1f' + r.options + '\x1f' + r.weights;
        if (!groups.count(key)) order.push_back(key);
        groups[key].push_back(&r);
    }

    checker ck{name};
    long n_pairs = 0, n_contrast = 0, n_consistency = 0;
    for (const auto& key : order) {
        const auto& rows = groups[key];
        const golden_row& first = *rows.front();
        const std::string opt_text = names + (first.options.empty() ? "" : "; " + first.options);
        SCOPED_TRACE(name + " [" + first.options + "]" + (first.weights.empty() ? "" : " " + first.weights));
        options o;
        try {
            o = parse_options(opt_text);
        } catch (const groupfit::error& e) {
            ADD_FAILURE() << "parse_options(\"" << opt_text << "\") threw: " << e.what();
            continue;
        }
        const fit f(s, o);

        if (first.report == "pairs") {
            ++n_pairs;
            table t;
            try {
                t = pairs_report(f);
            } catch (const groupfit::error& e) {
                ADD_FAILURE() << "pairs_report with \"" << opt_text << "\" threw: " << e.what();
                continue;
            }
            ASSERT_EQ(t.columns, pairs_columns());
            // Our rows by (level_a, level_b); every golden pair must be there
            // and every row of ours must be in the golden file.
            std::map<std::pair<std::string, std::string>, std::size_t> ours;
            for (std::size_t r = 0; r < t.rows.size(); ++r)
                ours[{cell_text(t, r, "level_a"), cell_text(t, r, "level_b")}] = r;
            std::set<std::pair<std::string, std::string>> want;
            double density = NAN;
            for (const auto* r : rows) {
                if (!r->level_a.empty()) want.insert({r->level_a, r->level_b});
                if (r->quantity == "crit_density") density = r->value;
            }
            EXPECT_EQ(ours.size(), t.rows.size()) << "duplicate pairs in our report";
            EXPECT_EQ(t.rows.size(), want.size()) << "number of comparisons (golden: " << want.size() << ")";
            // Method text (core/compare.cpp): the adjustment's name, one-sided
            // marker, and for Dunnett the algorithm and its error bound.
            const std::string method = t.rows.empty() ? "" : cell_text(t, 0, "method");
            EXPECT_TRUE(starts_with(method, adjust_name(o.adjust))) << "method '" << method << "'";
            if (o.side != side_kind::two_sided)
                EXPECT_NE(method.find(std::string("(one-sided, ") + side_name(o.side) + ")"), std::string::npos)
                    << "method '" << method << "'";
            double our_p_err = 0;
            bool qmc = false;
            if (o.adjust == adjust_kind::dunnett) {
                const bool product = method.find("[product-form integral, p error <= ") != std::string::npos;
                qmc = method.find("[Genz-Bretz randomized QMC, p error <= ") != std::string::npos ||
                      method.find("[low-rank conditional integral (randomized QMC, product-form "
                                  "control), p error <= ") != std::string::npos;
                EXPECT_TRUE(product || qmc) << "Dunnett method '" << method << "'";
                // Without covariates the correlation is product form (core/multcomp.hpp).
                if (p == 0) EXPECT_TRUE(product) << "no covariates: method '" << method << "'";
                our_p_err = stated_p_error(method);
                EXPECT_TRUE(our_p_err > 0 && our_p_err <= (qmc ? 1e-4 : 1e-8))
                    << "stated p error " << our_p_err << " in '" << method << "'";
                EXPECT_FALSE(std::isnan(density)) << "golden lacks crit_density for a Dunnett case";
            }
            // Our critical value's error, in units of the standard error.
            double our_crit_err_rel = 1e-9;  // t and F quantiles: relative
            double our_crit_err_abs = 0;
            if (o.adjust == adjust_kind::tukey) our_crit_err_rel = 1e-8;
            if (o.adjust == adjust_kind::dunnett)
                our_crit_err_abs = (qmc ? std::max(our_p_err, 1e-5) : std::max(our_p_err, 1e-12)) / density;

            for (const auto* r : rows) {
                if (r->quantity == "crit_density") continue;  // used above
                const auto it = ours.find({r->level_a, r->level_b});
                if (it == ours.end()) {
                    ADD_FAILURE() << ck.where(*r) << ": our report has no such pair (source: " << r->source << ")";
                    continue;
                }
                const std::size_t i = it->second;
                const double se = cell(t, i, "std_error");
                const double est = cell(t, i, "estimate");
                const std::string& q = r->quantity;
                const std::string kq = q + " [" + adjust_name(o.adjust) + (qmc ? ", QMC" : "") + "]";
                if (q == "estimate") {
                    ck.close(*r, est, 1e-9 * std::fabs(r->value) + est_floor + r->r_error, q);
                } else if (q == "std_error") {
                    ck.close(*r, se, 1e-9 * std::fabs(r->value) + r->r_error, q);
                } else if (q == "t_stat") {
                    ck.close(*r, cell(t, i, "t_stat"), 1e-9 * std::fabs(r->value) + est_floor / se + r->r_error, q);
                } else if (q == "df") {
                    ck.close(*r, cell(t, i, "df"), 0, q);
                } else if (q == "p_value" || q == "p_adjusted") {
                    const double ours_p = cell(t, i, q);
                    ck.close(*r, ours_p, p_tol(r->value, r->r_error + (q == "p_adjusted" ? our_p_err : 0)),
                             q == "p_adjusted" ? kq : q);
                    if (r->value > 0 && r->r_error == 0)
                        EXPECT_GT(ours_p, 0) << ck.where(*r) << ": R's value is positive (source: " << r->source << ")";
                } else if (q == "ci_lower" || q == "ci_upper") {
                    const double crit = std::fabs(r->value - est) / se;
                    const double tol = 1e-9 * std::fabs(r->value) + est_floor + r->r_error +
                                       (our_crit_err_rel * crit + our_crit_err_abs) * se;
                    ck.close(*r, cell(t, i, q), tol, kq);
                } else if (q == "p_adjusted_min") {
                    ck.bound(*r, cell(t, i, "p_adjusted"), r->r_error + our_p_err + 1e-12, +1, "p_adjusted bound [tukey]");
                } else if (q == "ci_lower_max") {
                    ck.bound(*r, cell(t, i, "ci_lower"), r->r_error + 1e-12 * ymag, -1, "ci_lower bound [tukey]");
                } else if (q == "ci_upper_min") {
                    ck.bound(*r, cell(t, i, "ci_upper"), r->r_error + 1e-12 * ymag, +1, "ci_upper bound [tukey]");
                } else {
                    ADD_FAILURE() << ck.where(*r) << ": unknown golden quantity '" << q << "'";
                }
            }
            // Every computable row has a note-free result here.
            for (std::size_t r = 0; r < t.rows.size(); ++r)
                EXPECT_TRUE(is_null(t.rows[r][col(t, "note")])) << "row " << r << " has a note";
            n_consistency += check_consistency(t, o, name + " [" + first.options + "]");

            // at= does not change comparisons of adjusted means (common slopes).
            if (p > 0 && first.options.find("at=") == std::string::npos) {
                const options o2 = parse_options(opt_text + "; at=" + g.covariates[0] + ":12.5");
                const fit f2(s, o2);
                const table t2 = pairs_report(f2);
                ASSERT_EQ(t2.rows.size(), t.rows.size());
                for (std::size_t r = 0; r < t.rows.size(); ++r)
                    for (const char* c : {"estimate", "std_error", "p_adjusted", "ci_lower", "ci_upper"}) {
                        const double a = cell(t, r, c), b = cell(t2, r, c);
                        EXPECT_TRUE(a == b || std::fabs(a - b) <= 1e-12 * std::max(1.0, std::fabs(a)))
                            << "row " << r << " " << c << " changes with at=: " << fmt17(a) << " vs "
                            << fmt17(b) << " (" << kIdentity << ")";
                        ++total_checks();
                    }
            }
        } else if (first.report == "contrast") {
            ++n_contrast;
            table t;
            try {
                t = contrast_report(f, first.weights);
            } catch (const groupfit::error& e) {
                ADD_FAILURE() << "contrast_report(\"" << first.weights << "\") with \"" << opt_text
                              << "\" threw: " << e.what();
                continue;
            }
            ASSERT_EQ(t.columns, contrast_columns());
            // Rows 1..k then the joint row.
            std::size_t k = 0;
            for (const auto* r : rows)
                if (r->row != "joint") k = std::max<std::size_t>(k, std::strtoul(r->row.c_str(), nullptr, 10));
            ASSERT_EQ(t.rows.size(), k + 1) << "contrast rows + joint row";
            const std::size_t joint = k;
            EXPECT_EQ(cell_text(t, joint, "kind"), "joint F test");
            // kind: contrast when the weights sum to zero (core/compare.hpp).
            {
                const auto specs = detail::split_list(first.weights, ';', false);
                ASSERT_EQ(specs.size(), k);
                for (std::size_t c = 0; c < k; ++c) {
                    double sum = 0, mag = 0;
                    for (const auto& term : detail::split_list(specs[c], ',', false)) {
                        double w = 0;
                        parse_double(trim(term.substr(term.rfind('=') + 1)), w);
                        sum += w, mag += std::fabs(w);
                    }
                    const bool is_contrast = std::fabs(sum) <= 1e-12 * mag;
                    const std::string kind = cell_text(t, c, "kind");
                    EXPECT_EQ(kind == "contrast", is_contrast) << "row " << c + 1 << " kind '" << kind << "'";
                    if (!is_contrast) {
                        EXPECT_TRUE(starts_with(kind, "combination of means")) << kind;
                        if (p > 0)
                            EXPECT_TRUE(starts_with(cell_text(t, c, "note"), "at " + g.covariates[0] + "="))
                                << "combination note '" << cell_text(t, c, "note") << "' names the covariate values";
                    }
                }
            }
            for (const auto* r : rows) {
                const std::string& q = r->quantity;
                std::size_t i = joint;
                if (r->row != "joint") {
                    i = std::strtoul(r->row.c_str(), nullptr, 10) - 1;
                    if (i >= k) {
                        ADD_FAILURE() << ck.where(*r) << ": bad row";
                        continue;
                    }
                }
                const double se = cell(t, i, "std_error");
                if (r->row == "joint") {
                    if (q == "df") {
                        ck.close(*r, cell(t, i, "df"), 0, "joint df");
                        // A dependent set: the note says so (core/compare.cpp).
                        const std::string note = cell_text(t, i, "note");
                        if (r->value < double(k))
                            EXPECT_EQ(note, "the contrasts are linearly dependent: the test has " +
                                                std::to_string(int(r->value)) + " degrees of freedom");
                        else
                            EXPECT_TRUE(is_null(t.rows[i][col(t, "note")])) << "joint note '" << note << "'";
                    } else if (q == "df_denom") {
                        ck.close(*r, cell(t, i, "df_denom"), 0, "joint df_denom");
                    } else if (q == "f_stat") {
                        ck.close(*r, cell(t, i, "f_stat"), 1e-9 * std::fabs(r->value) + r->r_error, "joint f_stat");
                    } else if (q == "p_value") {
                        ck.close(*r, cell(t, i, "p_value"), p_tol(r->value, r->r_error), "joint p_value");
                        if (r->value > 0) EXPECT_GT(cell(t, i, "p_value"), 0) << ck.where(*r);
                    } else {
                        ADD_FAILURE() << ck.where(*r) << ": unknown golden quantity '" << q << "'";
                    }
                    continue;
                }
                if (q == "estimate" || q == "ci_lower" || q == "ci_upper") {
                    ck.close(*r, cell(t, i, q), 1e-9 * std::fabs(r->value) + est_floor + r->r_error, "contrast " + q);
                } else if (q == "std_error") {
                    ck.close(*r, se, 1e-9 * std::fabs(r->value) + r->r_error, "contrast " + q);
                } else if (q == "t_stat") {
                    ck.close(*r, cell(t, i, q), 1e-9 * std::fabs(r->value) + est_floor / se + r->r_error,
                             "contrast " + q);
                } else if (q == "df") {
                    ck.close(*r, cell(t, i, q), 0, "contrast df");
                } else if (q == "p_value") {
                    ck.close(*r, cell(t, i, q), p_tol(r->value, r->r_error), "contrast p_value");
                    if (r->value > 0) EXPECT_GT(cell(t, i, q), 0) << ck.where(*r);
                } else {
                    ADD_FAILURE() << ck.where(*r) << ": unknown golden quantity '" << q << "'";
                }
            }
        } else {
            ADD_FAILURE() << "golden line " << first.line << ": unknown report '" << first.report << "'";
        }
    }
    // The generator writes both reports for every dataset.
    EXPECT_GE(n_pairs, 20) << name << ": too few option sets of pairs_report";
    EXPECT_GE(n_contrast, 6) << name << ": too few contrast sets";
    EXPECT_GT(n_consistency, 0) << name << ": no interval/p consistency check ran";
    std::printf("[compare] %-16s %3ld pairs option sets, %2ld contrast sets, %4ld consistency checks\n",
                name.c_str(), n_pairs, n_contrast, n_consistency);
}

INSTANTIATE_TEST_SUITE_P(RGolden, PairsGolden, ::testing::ValuesIn(kDatasets),
                         [](const ::testing::TestParamInfo<std::string>& i) { return i.param; });

// No pairs_*.csv beyond the expected ones goes untested.
TEST(PairsGoldenFiles, AllKnown) {
    std::set<std::string> known;
    for (const auto& d : kDatasets) known.insert("pairs_" + d + ".csv");
    known.insert("pairs_padjust.csv");
    std::error_code ec;
    ASSERT_TRUE(fs::is_directory(kGoldenDir, ec)) << kGoldenDir;
    for (const auto& e : fs::directory_iterator(kGoldenDir, ec)) {
        const std::string f = e.path().filename().string();
        if (starts_with(f, "pairs_")) EXPECT_TRUE(known.count(f)) << "untested golden file " << f;
    }
}

// ---------------------------------------------------------------------------
// p.adjust (stats::p.adjust, via pairs_padjust.csv)
// ---------------------------------------------------------------------------
TEST(PAdjust, HolmAndBenjaminiHochbergMatchR) {
    const fs::path path = kGoldenDir / "pairs_padjust.csv";
    ASSERT_TRUE(fs::exists(path)) << "golden file missing: " << path;
    golden_file g;
    {
        const std::string e = load_golden(path, g, false);
        ASSERT_TRUE(e.empty()) << path << ": " << e;
    }
    ASSERT_NE(g.header1.find(kVersions[0]), std::string::npos);
    std::map<std::string, std::map<std::string, std::vector<const golden_row*>>> vecs;
    for (const auto& r : g.rows) {
        ASSERT_EQ(r.report, "padjust");
        vecs[r.options][r.quantity].push_back(&r);
    }
    ASSERT_GE(vecs.size(), 5u);
    checker ck{"padjust"};
    for (auto& [name, q] : vecs) {
        SCOPED_TRACE(name);
        auto by_index = [](std::vector<const golden_row*> v) {
            std::sort(v.begin(), v.end(), [](auto* a, auto* b) { return std::stol(a->row) < std::stol(b->row); });
            return v;
        };
        const auto in = by_index(q["p"]), holm = by_index(q["holm"]), bh = by_index(q["bh"]);
        ASSERT_FALSE(in.empty());
        ASSERT_EQ(holm.size(), in.size());
        ASSERT_EQ(bh.size(), in.size());
        std::vector<double> p;
        for (const auto* r : in) p.push_back(r->value);
        const auto oh = detail::holm(p), ob = detail::benjamini_hochberg(p);
        ASSERT_EQ(oh.size(), p.size());
        ASSERT_EQ(ob.size(), p.size());
        for (std::size_t i = 0; i < p.size(); ++i)
            for (auto [ours, ref] : {std::pair{oh[i], holm[i]}, std::pair{ob[i], bh[i]}}) {
                if (std::isnan(ref->value)) {
                    EXPECT_TRUE(std::isnan(ours)) << ck.where(*ref) << ": NA in R (source: " << ref->source << ")";
                    ++total_checks();
                } else {
                    ck.close(*ref, ours, p_tol(ref->value, 0), "padjust " + ref->quantity);
                }
            }
    }
}

// ---------------------------------------------------------------------------
// Synthetic models: aliased covariates and no residual degrees of freedom
// ---------------------------------------------------------------------------
struct synthetic {
    summary s;
    synthetic(const std::vector<std::string>& labels, const std::vector<double>& x,
              const std::vector<double>& y, bool with_x) {
        s = summary(with_x ? 1 : 0, false);
        limits lim;
        for (std::size_t i = 0; i < y.size(); ++i) {
            double v[2];
            if (with_x) v[0] = x[i], v[1] = y[i];
            else v[0] = y[i];
            s.add_row(s.cell_for(level::from_text(labels[i]), lim), v, 1.0);
        }
    }
};

// Three levels; x constant within each level, equal in a and b (1) and 2 in c:
// x is aliased with the level indicators, a - b stays estimable (x cancels),
// a - c and b - c are not.
const std::vector<std::string> kAliasLabels = {"a", "a", "a", "a", "b", "b", "b",
                                               "c", "c", "c", "c", "c"};
const std::vector<double> kAliasY = {3.1, 2.7, 3.5, 2.9, 4.0, 4.4, 3.8, 5.2, 4.9, 5.6, 5.0, 5.3};
const std::vector<double> kAliasSomeX = {1, 1, 1, 1, 1, 1, 1, 2, 2, 2, 2, 2};
constexpr const char* kNullSource =
    " (core/compare.hpp: a comparison that cannot be computed gets NULLs and a note and is left out"
    " of the family)";
const std::vector<double> kAliasAllX = {1, 1, 1, 1, 2, 2, 2, 3, 3, 3, 3, 3};

std::size_t find_pair(const table& t, const std::string& a, const std::string& b) {
    for (std::size_t r = 0; r < t.rows.size(); ++r)
        if (cell_text(t, r, "level_a") == a && cell_text(t, r, "level_b") == b) return r;
    ADD_FAILURE() << "no row " << a << " vs " << b;
    return 0;
}

TEST(NotEstimable, SomeComparisonsAliasedOthersUnaffected) {
    const synthetic with(kAliasLabels, kAliasSomeX, kAliasY, true);
    const synthetic without(kAliasLabels, kAliasSomeX, kAliasY, false);
    const char* const cols[] = {"estimate", "std_error", "t_stat", "df", "p_value"};
    const std::string note = "not estimable: an aliased covariate confounds it";  // core/compare.cpp
    for (const std::string adj : {"none", "bonferroni", "holm", "sidak", "bh", "tukey", "scheffe"}) {
        SCOPED_TRACE("adjust=" + adj);
        const fit fw(with.s, parse_options("names=g, x; adjust=" + adj));
        ASSERT_TRUE(fw.aliased(0));
        const table t = pairs_report(fw);
        ASSERT_EQ(t.rows.size(), 3u);
        // a - c and b - c: NULLs and the note.
        for (auto [a, b] : {std::pair{"a", "c"}, std::pair{"b", "c"}}) {
            const std::size_t r = find_pair(t, a, b);
            for (const char* c : {"estimate", "std_error", "t_stat", "p_value", "p_adjusted", "ci_lower", "ci_upper"})
                EXPECT_TRUE(is_null(t.rows[r][col(t, c)]))
                    << a << "-" << b << " " << c << " must be NULL" << kNullSource;
            EXPECT_EQ(cell_text(t, r, "note"), note) << kNullSource;
            total_checks() += 8;
        }
        // a - b: the model without the aliased covariate spans the same space.
        const std::size_t r = find_pair(t, "a", "b");
        EXPECT_TRUE(is_null(t.rows[r][col(t, "note")])) << "an estimable comparison has no note" << kNullSource;
        const fit fo(without.s, parse_options("names=g; adjust=" + (adj == "tukey" || adj == "scheffe" ? adj : "none")));
        const table to = pairs_report(fo);
        const std::size_t ro = find_pair(to, "a", "b");
        for (const char* c : cols) {
            const double a = cell(t, r, c), b = cell(to, ro, c);
            EXPECT_TRUE(std::isfinite(a) && std::fabs(a - b) <= 1e-12 * std::max(1.0, std::fabs(b)))
                << c << ": aliased model " << fmt17(a) << ", model without x " << fmt17(b)
                << " (identity: x constant within levels adds nothing to the level indicators)";
            ++total_checks();
        }
        // The family has one computable member: m = 1, so bonferroni, holm,
        // sidak and bh leave the p-value as it is; tukey and scheffe still
        // refer to all three levels, like the model without x.
        const double padj = cell(t, r, "p_adjusted"), pref = cell(to, ro, "p_adjusted");
        EXPECT_TRUE(std::isfinite(padj)) << "the NULL rows must not make the estimable row's p NaN" << kNullSource;
        EXPECT_NEAR(padj, pref, 1e-12 * std::max(1e-300, pref)) << "(core/compare.hpp: m counts computable comparisons only)";
        EXPECT_NEAR(cell(t, r, "ci_lower"), cell(to, ro, "ci_lower"), 1e-12 * std::max(1.0, std::fabs(cell(to, ro, "ci_lower"))))
            << "(core/compare.hpp: m counts computable comparisons only)";
        EXPECT_NEAR(cell(t, r, "ci_upper"), cell(to, ro, "ci_upper"), 1e-12 * std::max(1.0, std::fabs(cell(to, ro, "ci_upper"))))
            << "(core/compare.hpp: m counts computable comparisons only)";
        total_checks() += 3;
    }
    // Dunnett with one computable comparison: the single-comparison t test.
    {
        const fit fw(with.s, parse_options("names=g, x; vs=a"));
        const table t = pairs_report(fw);
        ASSERT_EQ(t.rows.size(), 2u);
        const std::size_t rb = find_pair(t, "b", "a"), rc = find_pair(t, "c", "a");
        EXPECT_TRUE(is_null(t.rows[rc][col(t, "p_adjusted")])) << kNullSource;
        EXPECT_EQ(cell_text(t, rc, "note"), note) << kNullSource;
        const double praw = cell(t, rb, "p_value"), padj = cell(t, rb, "p_adjusted");
        EXPECT_TRUE(std::isfinite(padj)) << kNullSource;
        EXPECT_NEAR(padj, praw, 1e-9 * praw + 1e-12)
            << "identity: the multivariate t of one comparison is Student's t (core/multcomp.hpp)";
        const fit fo(without.s, parse_options("names=g; adjust=none; vs=a"));
        const table to = pairs_report(fo);
        const std::size_t ro = find_pair(to, "b", "a");
        EXPECT_NEAR(cell(t, rb, "ci_lower"), cell(to, ro, "ci_lower"), 1e-8 * std::fabs(cell(to, ro, "ci_lower")))
            << "identity: one-comparison Dunnett interval = t interval of the model without x";
        EXPECT_NEAR(cell(t, rb, "ci_upper"), cell(to, ro, "ci_upper"), 1e-8 * std::fabs(cell(to, ro, "ci_upper")))
            << "identity: one-comparison Dunnett interval = t interval of the model without x";
        total_checks() += 5;
    }
    // contrast_report: the estimable contrast works; the others are errors.
    {
        const fit fw(with.s, parse_options("names=g, x"));
        const table t = contrast_report(fw, "a=1, b=-1");
        EXPECT_TRUE(std::isfinite(cell(t, 0, "p_value"))) << "an estimable contrast is computed" << kNullSource;
        EXPECT_TRUE(std::isfinite(cell(t, 1, "f_stat"))) << "an estimable contrast is computed" << kNullSource;
        try {
            contrast_report(fw, "a=1, c=-1");
            ADD_FAILURE() << "a non-estimable contrast must be an error";
        } catch (const groupfit::error& e) {
            EXPECT_STREQ(e.what(), "weights: '1*a - 1*c' is not estimable: an aliased covariate confounds it")
                << "(expected text from core/compare.cpp)";
        }
        total_checks() += 3;
    }
}

TEST(NotEstimable, EveryComparisonAliased) {
    const synthetic with(kAliasLabels, kAliasAllX, kAliasY, true);
    for (const std::string opt : {"adjust=none", "adjust=bonferroni", "adjust=holm", "adjust=sidak", "adjust=bh",
                                  "adjust=tukey", "adjust=scheffe", "vs=b", "vs=b; side=greater",
                                  "adjust=bonferroni; vs=c; side=less"}) {
        SCOPED_TRACE(opt);
        const fit f(with.s, parse_options("names=g, x; " + opt));
        table t;
        ASSERT_NO_THROW(t = pairs_report(f));
        ASSERT_FALSE(t.rows.empty());
        for (std::size_t r = 0; r < t.rows.size(); ++r) {
            for (const char* c : {"estimate", "std_error", "t_stat", "p_value", "p_adjusted", "ci_lower", "ci_upper"})
                EXPECT_TRUE(is_null(t.rows[r][col(t, c)])) << "row " << r << " " << c << kNullSource;
            EXPECT_EQ(cell_text(t, r, "note"), "not estimable: an aliased covariate confounds it") << kNullSource;
            EXPECT_FALSE(is_null(t.rows[r][col(t, "df")])) << "df is still the model's (core/compare.cpp)";
            total_checks() += 9;
        }
    }
}

TEST(NoResidualDf, NullsAndNote) {
    // One row per level: df = 0, no standard errors.
    const synthetic one({"a", "b", "c"}, {}, {1.0, 2.5, 4.0}, false);
    const fit f(one.s, parse_options("adjust=bonferroni"));
    ASSERT_EQ(f.df_resid(), 0);
    const table t = pairs_report(f);
    ASSERT_EQ(t.rows.size(), 3u);
    for (std::size_t r = 0; r < t.rows.size(); ++r) {
        EXPECT_FALSE(is_null(t.rows[r][col(t, "estimate")]));
        for (const char* c : {"std_error", "t_stat", "df", "p_value", "p_adjusted", "ci_lower", "ci_upper"})
            EXPECT_TRUE(is_null(t.rows[r][col(t, c)])) << "row " << r << " " << c << kNullSource;
        EXPECT_EQ(cell_text(t, r, "note"), "no residual degrees of freedom: no standard error") << kNullSource;
        total_checks() += 9;
    }
    EXPECT_NEAR(cell(t, find_pair(t, "a", "c"), "estimate"), -3.0, 1e-15) << "1.0 - 4.0 (the data)";
}

// ---------------------------------------------------------------------------
// Bad input: exact messages from core/options.cpp, core/fit.cpp, core/compare.cpp
// ---------------------------------------------------------------------------
std::string error_of(const std::function<void()>& fn) {
    try {
        fn();
    } catch (const groupfit::error& e) {
        return e.what();
    }
    return "(no error)";
}

TEST(BadInput, ExactMessages) {
    const synthetic three(kAliasLabels, kAliasSomeX, kAliasY, false);   // levels a, b, c; no covariate
    const synthetic withx(kAliasLabels, {0.3, 1.2, 0.8, 2.0, 1.1, 0.4, 1.9, 0.7, 1.5, 0.2, 1.0, 1.3},
                          kAliasY, true);
    auto pairs_err = [&](const summary& s, const std::string& opt) {
        return error_of([&] {
            const fit f(s, parse_options(opt));
            pairs_report(f);
        });
    };
    auto contrast_err = [&](const summary& s, const std::string& opt, const std::string& w) {
        return error_of([&] {
            const fit f(s, parse_options(opt));
            contrast_report(f, w);
        });
    };
    struct expect_case {
        std::string what, got, want;
    };
    // The expected texts are those thrown in core/options.cpp (parse_options),
    // core/fit.cpp (find_level, at_values) and core/compare.cpp (weights).
    const std::vector<expect_case> cases = {
        {"adjust=foo", error_of([] { parse_options("adjust=foo"); }),
         "options: adjust must be one of none, bonferroni, holm, sidak, bh, tukey, scheffe, dunnett (not 'foo')"},
        {"vs=unknown level", pairs_err(three.s, "vs=zzz"),
         "options: vs names an unknown level 'zzz' (levels: a, b, c)"},
        {"adjust=bonferroni; vs=unknown", pairs_err(three.s, "adjust=bonferroni; vs=A"),
         "options: vs names an unknown level 'A' (levels: a, b, c)"},
        {"adjust=tukey with vs=", error_of([] { parse_options("adjust=tukey; vs=a"); }),
         "options: adjust=tukey compares all pairs and cannot be combined with vs=; for comparisons with a "
         "control use adjust=dunnett (or none, bonferroni, holm, sidak, bh, scheffe)"},
        {"adjust=dunnett without vs=", error_of([] { parse_options("adjust=dunnett"); }),
         "options: adjust=dunnett compares every level with a control: name it with vs=LEVEL"},
        {"side= without vs=", error_of([] { parse_options("side=greater"); }),
         "options: side= applies to comparisons with a control (vs=LEVEL)"},
        {"side= with adjust=none but no vs=", error_of([] { parse_options("adjust=none; side=less"); }),
         "options: side= applies to comparisons with a control (vs=LEVEL)"},
        {"side=up", error_of([] { parse_options("vs=a; side=up"); }),
         "options: side must be one of two_sided, greater, less (not 'up')"},
        {"scheffe one-sided", error_of([] { parse_options("adjust=scheffe; vs=a; side=less"); }),
         "options: side= is not available with adjust=scheffe (two-sided only)"},
        {"at= unknown covariate (pairs)", pairs_err(withx.s, "names=g, x; at=y:3"),
         "options: at names an unknown covariate 'y' (covariates: x)"},
        {"at= unknown covariate (contrast)", contrast_err(withx.s, "names=g, x; at=z:1", "a=1, b=-1"),
         "options: at names an unknown covariate 'z' (covariates: x)"},
        {"at= without covariates", pairs_err(three.s, "at=x:1"),
         "options: at names an unknown covariate 'x' (covariates: none)"},
        {"at= not a number", error_of([] { parse_options("names=g, x; at=x:abc"); }),
         "options: at must be a number, not 'abc'"},
        {"at= without a value", error_of([] { parse_options("at=x"); }),
         "options: at takes covariate:value pairs, for example at=distance_km:25, weight_kg:3 (not 'x')"},
        {"conf out of range", error_of([] { parse_options("conf=1.5"); }),
         "options: conf must be between 0 and 1, for example 0.95 (not '1.5')"},
        {"weights: unknown level", contrast_err(three.s, "", "a=1, zzz=-1"),
         "weights: a contrast names an unknown level 'zzz' (levels: a, b, c)"},
        {"weights: not a number", contrast_err(three.s, "", "a=1, b=minus one"),
         "weights: the weight of 'b' must be a number, not 'minus one'"},
        {"weights: empty weight", contrast_err(three.s, "", "a=1, b="),
         "weights: the weight of 'b' must be a number, not ''"},
        {"weights: no '='", contrast_err(three.s, "", "a=1, b"),
         "weights: 'b' is not level=weight (for example 'a=1, b=-0.5, c=-0.5; a=1, d=-1')"},
        {"weights: level twice", contrast_err(three.s, "", "a=1, a=-1"),
         "weights: level 'a' appears twice in one contrast"},
        {"weights: all zero", contrast_err(three.s, "", "a=0, b=0"), "weights: a contrast has only zero weights"},
        {"weights: nothing", contrast_err(three.s, "", " ; "), "weights: no contrast given (for example 'a=1, b=-1')"},
    };
    for (const auto& c : cases) {
        const char* src = c.want.find("names an unknown") != std::string::npos ? "core/fit.cpp"
                          : starts_with(c.want, "weights:") ? "core/compare.cpp"
                                                             : "core/options.cpp";
        EXPECT_EQ(c.got, c.want) << c.what << " (expected text from " << src << ")";
        ++total_checks();
    }
    // One level: nothing to compare (core/compare.cpp).
    const synthetic one({"a", "a", "a"}, {}, {1.0, 2.0, 4.0}, false);
    EXPECT_EQ(pairs_err(one.s, ""), "comparisons need at least two levels; the model has one")
        << "(expected text from core/compare.cpp)";
    ++total_checks();
}

// Prints the largest differences per reference when the run ends.
class CompareReport : public ::testing::Environment {
public:
    void TearDown() override {
        std::printf("[compare] %ld checks in all\n", total_checks());
        for (const auto& [k, e] : stats())
            std::printf("[compare]   %-62s n=%5ld  max |diff| %.3g  max rel %.3g  max diff/tol %.3g%s%s\n",
                        k.c_str(), e.count, e.max_abs, e.max_rel, e.max_use,
                        e.where_abs.empty() ? "" : "  at ", e.where_abs.c_str());
    }
};
const auto* const compare_report_env = ::testing::AddGlobalTestEnvironment(new CompareReport);

}  // namespace
