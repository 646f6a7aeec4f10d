// The R oracle: every number in tests/oracle/golden/*.csv is compared with what
// groupfit's core computes from the same data.
//
// Source of every expected value: R 4.2.2 lm via tests/oracle/make_golden.R
// (summary.lm, drop1(test = "F"), logLik/AIC/BIC, predict(se.fit = TRUE) and
// oneway.test(var.equal = FALSE)); the file format is described in
// tests/oracle/README.md. R is only a reference calculator here: the codings
// are groupfit's own definitions, which the generator hands to R as explicit
// matrices K (quantity k:m).
//
// The test is data driven. Each golden file names its data file, its model and
// its levels in its header; the test reads the data the way the generator did
// (complete cases; an empty field is NULL), builds a summary, and fits every
// coding/base/spacing combination the golden file holds. Every golden row must
// be matched by a check: an unknown quantity, a missing golden file, a missing
// data file, or a golden file that lacks a quantity the generator always writes
// is a failure, never a skip.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <map>
#include <memory>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "coding.hpp"
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

constexpr const char* kSource = "R 4.2.2 lm via tests/oracle/make_golden.R";
constexpr const char* kRVersion = "R version 4.2.2";

const fs::path kRoot = GROUPFIT_SOURCE_DIR;
const fs::path kGoldenDir = kRoot / "tests" / "oracle" / "golden";

// The golden files the generator writes (tests/oracle/README.md). Each must be
// present; any further file in the folder is tested as well.
const std::vector<std::string> kExpectedDatasets = {
    "plantgrowth", "chickwts", "insectsprays", "toothgrowth",
    "iris",        "mtcars",   "mtcars_weighted", "deliveries"};

// CSV, numbers and text, and MD5 (to check that datasets/deliveries.csv is the
// file the golden values were computed from: the golden header records its
// md5) come from golden_csv.hpp.
using namespace gf_golden;

// ---------------------------------------------------------------------------
// Golden file
// ---------------------------------------------------------------------------
struct golden_row {
    std::string coding, base, spacing, quantity, term, text;
    double value = NAN;
    bool numeric = false;
    int line = 0;
};

struct golden_file : golden_header {
    std::string dataset;
    std::vector<golden_row> rows;
};

// Parses a golden file; returns an empty string on success, else what is wrong.
std::string load_golden(const fs::path& path, golden_file& g) {
    std::string body;
    if (!read_file(path, body)) return "cannot read " + path.string();
    g.dataset = path.stem().string();
    std::string csv;
    if (std::string e = parse_golden_header(body, g, csv); !e.empty()) return e;
    if (g.data_path.empty() || g.response.empty() || g.group.empty())
        return "header line 2 lacks 'data:' or 'model:': " + g.header2;

    const auto rows = parse_csv(csv);
    if (rows.empty()) return "no CSV header";
    const std::vector<std::string> want = {"dataset", "coding", "base",  "spacing",
                                           "quantity", "term",  "value"};
    if (rows[0].size() != want.size()) return "unexpected CSV header";
    for (std::size_t i = 0; i < want.size(); ++i)
        if (rows[0][i].text != want[i]) return "unexpected CSV header column " + rows[0][i].text;
    for (std::size_t r = 1; r < rows.size(); ++r) {
        const auto& f = rows[r];
        if (f.size() != 7)
            return "data row " + std::to_string(r) + " has " + std::to_string(f.size()) + " fields";
        golden_row gr{f[1].text, f[2].text, f[3].text, f[4].text, f[5].text, f[6].text};
        gr.line = int(r) + int(g.comment_lines) + 1;
        if (f[0].text != g.dataset)
            return "row " + std::to_string(r) + " names dataset '" + f[0].text + "'";
        gr.numeric = parse_double(gr.text, gr.value);
        if (!gr.numeric && gr.quantity != "level_label")
            return "row " + std::to_string(r) + " (" + gr.quantity + ") has no finite number: '" +
                   gr.text + "'";
        g.rows.push_back(std::move(gr));
    }
    return {};
}

// ---------------------------------------------------------------------------
// Data: read the data file named in the header into a summary
// ---------------------------------------------------------------------------
struct loaded_data {
    summary s;
    long rows_read = 0;
};

std::string load_data(const golden_file& g, loaded_data& out) {
    const fs::path path = kRoot / g.data_path;
    std::string body;
    if (!read_file(path, body)) return "cannot read the data file " + path.string();
    if (!g.md5.empty()) {
        const std::string got = md5_hex(body);
        if (got != g.md5)
            return path.string() + " has md5 " + got + " but the golden values were computed from md5 " +
                   g.md5 + "; regenerate with Rscript tests/oracle/make_golden.R";
    }
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

    // Numeric grouping when every non-NULL group value is a number (so that
    // levels order numerically and spacing=values applies), else text.
    bool numeric_group = true;
    for (std::size_t r = 1; r < rows.size(); ++r) {
        if (rows[r].size() != rows[0].size())
            return path.string() + " row " + std::to_string(r) + " has the wrong number of fields";
        double v;
        const auto& t = rows[r][cg].text;
        if (!t.empty() && !parse_double(t, v)) numeric_group = false;
    }

    const int p = int(g.covariates.size());
    out.s = summary(p, !g.weight.empty());
    limits lim;
    std::vector<double> vals(p + 1);
    for (std::size_t r = 1; r < rows.size(); ++r) {
        const auto& f = rows[r];
        ++out.rows_read;
        auto num = [&](int c, double& v) -> std::string {
            if (f[c].text.empty()) return "null";
            if (!parse_double(f[c].text, v))
                return path.string() + " row " + std::to_string(r) + ": '" + f[c].text +
                       "' is not a number";
            return {};
        };
        std::string e;
        if ((e = num(cy, vals[p])) == "null") { out.s.drop(drop_reason::null_response); continue; }
        if (!e.empty()) return e;
        if (f[cg].text.empty()) { out.s.drop(drop_reason::null_group); continue; }
        bool null_x = false;
        for (int j = 0; j < p; ++j) {
            if ((e = num(cx[j], vals[j])) == "null") { null_x = true; break; }
            if (!e.empty()) return e;
        }
        if (null_x) { out.s.drop(drop_reason::null_covariate); continue; }
        double w = 1.0;
        if (cw >= 0) {
            if ((e = num(cw, w)) == "null") { out.s.drop(drop_reason::null_weight); continue; }
            if (!e.empty()) return e;
            if (!(w > 0)) return "non-positive weight in " + path.string();
        }
        level lv;
        if (numeric_group) {
            double gv;
            parse_double(f[cg].text, gv);
            lv = level::from_real(gv);
        } else {
            lv = level::from_text(f[cg].text);
        }
        out.s.add_row(out.s.cell_for(lv, lim), vals.data(), w);
    }
    return {};
}

// ---------------------------------------------------------------------------
// Comparison bookkeeping
// ---------------------------------------------------------------------------
struct kind_stats {
    long count = 0;
    double max_rel = 0;        // max |ours - R| / |R| over R != 0 (not theoretical zeros)
    std::string max_rel_where;
    double max_use = 0;        // max |ours - R| / tolerance
};
std::map<std::string, kind_stats>& global_stats() {
    static std::map<std::string, kind_stats> m;
    return m;
}
std::map<std::string, long>& dataset_counts() {
    static std::map<std::string, long> m;
    return m;
}

struct checker {
    std::string dataset, combo;
    std::map<std::string, kind_stats> stats;
    long count = 0;

    void record(const std::string& kind, double rel, double use, const std::string& where) {
        for (auto* m : {&stats, &global_stats()}) {
            auto& k = (*m)[kind];
            ++k.count;
            if (rel > k.max_rel) k.max_rel = rel, k.max_rel_where = where;
            k.max_use = std::max(k.max_use, use);
        }
        ++count;
    }

    std::string where(const std::string& quantity, const std::string& term) const {
        return dataset + " [" + combo + "] " + quantity + (term.empty() ? "" : " " + term);
    }

    // Real-valued check: passes when |ours - R| <= max(rel_tol * |R|, abs_floor).
    void real(const std::string& kind, const std::string& quantity, const std::string& term,
              double ours, double r, double abs_floor, double rel_tol = 1e-9,
              bool theoretical_zero_ok = false) {
        const double diff = std::fabs(ours - r);
        const double tol = std::max(rel_tol * std::fabs(r), abs_floor);
        const bool ok = std::isfinite(ours) && diff <= tol;
        const double rel = (r != 0 && !(theoretical_zero_ok && std::fabs(r) <= abs_floor))
                               ? diff / std::fabs(r)
                               : 0.0;
        record(kind, std::isfinite(ours) ? rel : INFINITY, tol > 0 ? diff / tol : 0,
               where(quantity, term));
        if (!ok)
            ADD_FAILURE() << where(quantity, term) << ": ours " << fmt17(ours) << ", R's "
                          << fmt17(r) << " (|diff| " << diff << ", tolerance " << tol
                          << "; source: " << kSource << ")";
    }

    // p-values: relative 1e-9, or absolute 1e-15 for tiny ones; a positive R
    // p-value must also be positive here (an underflow to 0 would otherwise
    // hide under the absolute floor).
    void pvalue(const std::string& quantity, const std::string& term, double ours, double r) {
        real("p_value", quantity, term, ours, r, 1e-15);
        if (r > 0 && !(ours > 0))
            ADD_FAILURE() << where(quantity, term) << ": ours " << fmt17(ours) << " but R's "
                          << fmt17(r) << " is positive (source: " << kSource << ")";
    }

    void exact(const std::string& kind, const std::string& quantity, const std::string& term,
               double ours, double r) {
        record(kind, ours == r ? 0.0 : INFINITY, ours == r ? 0.0 : INFINITY, where(quantity, term));
        if (ours != r)
            ADD_FAILURE() << where(quantity, term) << ": ours " << fmt17(ours) << ", R's "
                          << fmt17(r) << " (must be equal; source: " << kSource << ")";
    }

    void text(const std::string& kind, const std::string& quantity, const std::string& term,
              const std::string& ours, const std::string& r) {
        record(kind, ours == r ? 0.0 : INFINITY, ours == r ? 0.0 : INFINITY, where(quantity, term));
        if (ours != r)
            ADD_FAILURE() << where(quantity, term) << ": ours '" << ours << "', R's '" << r
                          << "' (source: " << kSource << ")";
    }
};

// ---------------------------------------------------------------------------
// Reading our report tables
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
    return NAN;  // NULL or text
}

std::string text_of(const value& v) {
    if (auto s = std::get_if<std::string>(&v)) return *s;
    return {};
}

double cell(const table& t, std::size_t row, const std::string& column) {
    const int c = col(t, column);
    if (c < 0 || row >= t.rows.size()) return NAN;
    return real_of(t.rows[row][c]);
}

// Row of the tests report with this term and method; -1 when absent.
long tests_row(const table& t, const std::string& term, const std::string& method) {
    const int ct = col(t, "term"), cm = col(t, "method");
    for (std::size_t r = 0; r < t.rows.size(); ++r)
        if (text_of(t.rows[r][ct]) == term && text_of(t.rows[r][cm]) == method) return long(r);
    return -1;
}

std::string quote_label(const std::string& s) {
    bool plain = !s.empty() && s.find_first_of(",;=\"/") == std::string::npos &&
                 !std::isspace(static_cast<unsigned char>(s.front())) &&
                 !std::isspace(static_cast<unsigned char>(s.back()));
    if (plain) return s;
    std::string q = "\"";
    for (char c : s) q += c == '"' ? std::string("\"\"") : std::string(1, c);
    return q + "\"";
}

// Position m (1-based) of a golden term "level:m" or "g:m"; 0 when not of that form.
int index_of(const std::string& term, const std::string& prefix) {
    if (!starts_with(term, prefix)) return 0;
    char* end = nullptr;
    const long v = std::strtol(term.c_str() + prefix.size(), &end, 10);
    return (*end == '\0' && v > 0) ? int(v) : 0;
}

// ---------------------------------------------------------------------------
// The test: one case per golden file
// ---------------------------------------------------------------------------
std::vector<std::string> datasets_to_test() {
    std::set<std::string> names(kExpectedDatasets.begin(), kExpectedDatasets.end());
    std::error_code ec;
    if (fs::is_directory(kGoldenDir, ec))
        for (const auto& e : fs::directory_iterator(kGoldenDir, ec)) {
            const std::string stem = e.path().stem().string();
            // multcomp_* and pairs_* come from the distribution and comparison
            // oracles (make_multcomp_golden.*, make_pairs_golden.R), and cross_*
            // from make_cross_golden.R, are checked by test_multcomp,
            // test_compare and test_cross.
            if (stem.rfind("multcomp_", 0) == 0 || stem.rfind("pairs_", 0) == 0 ||
                stem.rfind("cross_", 0) == 0)
                continue;
            if (e.path().extension() == ".csv") names.insert(stem);
        }
    // Keep the README's order first, then anything else alphabetically.
    std::vector<std::string> out = kExpectedDatasets;
    for (const auto& n : names)
        if (std::find(out.begin(), out.end(), n) == out.end()) out.push_back(n);
    return out;
}

class Oracle : public ::testing::TestWithParam<std::string> {};

TEST_P(Oracle, MatchesR) {
    const std::string name = GetParam();
    const fs::path path = kGoldenDir / (name + ".csv");
    ASSERT_TRUE(fs::exists(path)) << "golden file missing: " << path
                                  << " (regenerate with Rscript tests/oracle/make_golden.R)";
    golden_file g;
    {
        const std::string e = load_golden(path, g);
        ASSERT_TRUE(e.empty()) << path << ": " << e;
    }
    // The citation in every message names R 4.2.2; the file must say so too.
    ASSERT_NE(g.header1.find(kRVersion), std::string::npos)
        << path << " was not generated with " << kRVersion << ": " << g.header1;

    loaded_data data;
    {
        const std::string e = load_data(g, data);
        ASSERT_TRUE(e.empty()) << e;
    }
    const summary& s = data.s;
    const int p = int(g.covariates.size());
    ASSERT_GE(s.cells(), 2u) << name << ": fewer than two levels in the data";
    const std::size_t L = s.cells();

    // --- coding-independent golden rows, and the level labels by position
    std::vector<const golden_row*> fixed;
    std::vector<std::string> labels(L);
    for (const auto& r : g.rows)
        if (r.coding.empty()) {
            fixed.push_back(&r);
            if (r.quantity == "level_label") {
                const int m = index_of(r.term, "level:");
                ASSERT_TRUE(m >= 1 && std::size_t(m) <= L)
                    << name << " line " << r.line << ": level_label " << r.term << " but the data has "
                    << L << " levels";
                labels[m - 1] = r.text;
            }
        }
    for (std::size_t m = 0; m < L; ++m)
        ASSERT_FALSE(labels[m].empty()) << name << ": golden file lacks level_label level:" << m + 1;

    // The golden file must hold every quantity the generator always writes.
    {
        std::set<std::string> have;
        for (const auto* r : fixed) have.insert(r->quantity + "|" + r->term);
        std::vector<std::string> need = {"n_obs|",   "n_levels|",      "residual_df|", "rss|",
                                         "r_squared|", "adj_r_squared|", "sigma|",     "f_stat|",
                                         "f_num_df|", "f_den_df|",      "f_p|",        "loglik|",
                                         "loglik_df|", "aic|",          "bic|"};
        for (std::size_t m = 1; m <= L; ++m)
            for (const char* q : {"level_n", "level_mean", "adjusted_mean", "adjusted_mean_se"})
                need.push_back(std::string(q) + "|level:" + std::to_string(m));
        if (!g.weight.empty())
            for (std::size_t m = 1; m <= L; ++m)
                need.push_back("level_weight_sum|level:" + std::to_string(m));
        std::vector<std::string> terms = {"g"};
        for (const auto& x : g.covariates) terms.push_back(x), need.push_back("covariate_mean|" + x);
        for (const auto& t : terms)
            for (const char* q : {"drop1_df", "drop1_ss", "drop1_rss", "drop1_F", "drop1_p"})
                need.push_back(std::string(q) + "|" + t);
        if (p == 0 && g.weight.empty())
            for (const char* q : {"welch_F|", "welch_num_df|", "welch_den_df|", "welch_p|"})
                need.push_back(q);
        for (const auto& n : need)
            EXPECT_TRUE(have.count(n)) << name << ": golden file lacks " << n;
    }

    // --- the coding combinations, in file order
    struct combo {
        std::string coding, base, spacing;
        std::vector<const golden_row*> rows;
    };
    std::vector<combo> combos;
    for (const auto& r : g.rows) {
        if (r.coding.empty()) continue;
        auto it = std::find_if(combos.begin(), combos.end(), [&](const combo& c) {
            return c.coding == r.coding && c.base == r.base && c.spacing == r.spacing;
        });
        if (it == combos.end()) combos.push_back({r.coding, r.base, r.spacing, {}}), it = combos.end() - 1;
        it->rows.push_back(&r);
    }
    {
        std::set<std::string> codings;
        for (const auto& c : combos) codings.insert(c.coding);
        for (const char* k : {"dummy", "effect", "weighted_effect", "helmert", "reverse_helmert",
                              "successive", "polynomial", "custom"})
            EXPECT_TRUE(codings.count(k)) << name << ": golden file has no '" << k << "' coding";
    }

    checker ck;
    ck.dataset = name;
    const std::string names_opt = [&] {
        std::string n = "names=g";
        for (const auto& x : g.covariates) n += ", " + quote_label(x);
        return n;
    }();

    for (const combo& cb : combos) {
        ck.combo = cb.coding + (cb.base.empty() ? "" : " base=" + cb.base) +
                   (cb.spacing.empty() ? "" : " spacing=" + cb.spacing);
        SCOPED_TRACE(name + " [" + ck.combo + "]");

        // Every coefficient row and every K entry must be in the golden file.
        std::vector<std::string> coef_terms = {"intercept"};
        for (std::size_t i = 1; i < L; ++i) coef_terms.push_back("g:" + std::to_string(i));
        {
            std::set<std::string> have;
            for (const auto* r : cb.rows) have.insert(r->quantity + "|" + r->term);
            for (std::size_t i = 0; i < L; ++i)
                for (std::size_t m = 1; m <= L; ++m)
                    EXPECT_TRUE(have.count("k:" + std::to_string(m) + "|" + coef_terms[i]))
                        << "golden lacks k:" << m << " " << coef_terms[i];
            std::vector<std::string> all = coef_terms;
            all.insert(all.end(), g.covariates.begin(), g.covariates.end());
            for (const auto& t : all)
                for (const char* q : {"estimate", "std_error", "t_stat", "p_value"})
                    EXPECT_TRUE(have.count(std::string(q) + "|" + t)) << "golden lacks " << q << " " << t;
        }

        // Options: our names, the base level by label, the spacing, custom rows.
        std::string opt = "coding=" + cb.coding + "; " + names_opt;
        if (!cb.base.empty()) {
            const long b = std::strtol(cb.base.c_str(), nullptr, 10);
            ASSERT_TRUE(b >= 1 && std::size_t(b) <= L) << "bad golden base '" << cb.base << "'";
            opt += "; base=" + quote_label(labels[b - 1]);
        }
        if (!cb.spacing.empty()) opt += "; spacing=" + cb.spacing;
        if (cb.coding == "custom") {
            std::vector<std::vector<double>> k(L - 1, std::vector<double>(L, NAN));
            for (const auto* r : cb.rows) {
                const int i = index_of(r->term, "g:"), m = index_of(r->quantity, "k:");
                if (i >= 1 && std::size_t(i) < L && m >= 1 && std::size_t(m) <= L) k[i - 1][m - 1] = r->value;
            }
            std::string rows;
            for (std::size_t i = 0; i + 1 < L; ++i) {
                rows += i ? " / " : "";
                for (std::size_t m = 0; m < L; ++m) {
                    ASSERT_FALSE(std::isnan(k[i][m])) << "custom row g:" << i + 1 << " incomplete";
                    rows += (m ? "," : "") + fmt17(k[i][m]);
                }
            }
            opt += "; custom=" + rows;
        }

        options o;
        try {
            o = parse_options(opt);
        } catch (const groupfit::error& e) {
            ADD_FAILURE() << "parse_options(\"" << opt << "\") threw: " << e.what();
            continue;
        }
        std::unique_ptr<fit> fp;
        table coef, levs, tests, summ;
        std::unique_ptr<coding> cd;
        try {
            fp = std::make_unique<fit>(s, o);
            cd = std::make_unique<coding>(*fp);
            coef = coef_report(*fp);
            levs = levels_report(*fp);
            tests = tests_report(*fp);
            summ = summary_report(*fp, s);
        } catch (const groupfit::error& e) {
            ADD_FAILURE() << "fit with options \"" << opt << "\" threw: " << e.what();
            continue;
        }
        const fit& f = *fp;
        ASSERT_EQ(f.levels(), L);
        ASSERT_EQ(coef.rows.size(), L + std::size_t(p)) << "coef_report rows";
        ASSERT_EQ(levs.rows.size(), L) << "levels_report rows";
        ASSERT_EQ(summ.rows.size(), 1u) << "summary_report rows";
        ASSERT_EQ(cd->size(), L);
        // Our coefficient rows are named like the golden terms (intercept, g, covariates).
        {
            const int ct = col(coef, "term");
            for (std::size_t i = 0; i < coef.rows.size(); ++i) {
                const std::string want = i == 0 ? "intercept" : i < L ? "g" : g.covariates[i - L];
                EXPECT_EQ(text_of(coef.rows[i][ct]), want) << "coef_report row " << i;
            }
        }

        // Scales for the absolute floors of the coefficient table: the largest
        // golden magnitude over the intercept and group rows of this coding
        // (a difference of level means carries the rounding of the means).
        std::map<std::string, double> gscale;
        for (const auto* r : cb.rows)
            if (r->term == "intercept" || starts_with(r->term, "g:"))
                gscale[r->quantity] = std::max(gscale[r->quantity], std::fabs(r->value));

        auto coef_row = [&](const std::string& term) -> long {
            if (term == "intercept") return 0;
            if (int i = index_of(term, "g:"); i >= 1 && std::size_t(i) < L) return i;
            for (int j = 0; j < p; ++j)
                if (g.covariates[j] == term) return long(L) + j;
            return -1;
        };

        for (const auto* r : cb.rows) {
            const std::string& q = r->quantity;
            if (q == "estimate" || q == "std_error" || q == "t_stat" || q == "p_value") {
                const long row = coef_row(r->term);
                if (row < 0) {
                    ADD_FAILURE() << "golden line " << r->line << ": unknown term " << r->term;
                    continue;
                }
                const double ours = cell(coef, std::size_t(row), q);
                const bool group_row = row < long(L);
                if (q == "p_value") {
                    ck.pvalue(q, r->term, ours, r->value);
                } else {
                    const double scale = group_row ? gscale[q] : std::fabs(r->value);
                    ck.real(q, q, r->term, ours, r->value, 1e-12 * scale);
                }
            } else if (const int m = index_of(q, "k:"); m >= 1) {
                long i = r->term == "intercept" ? 0 : index_of(r->term, "g:");
                if (std::size_t(m) > L || i < 0 || std::size_t(i) >= L ||
                    (i == 0 && r->term != "intercept")) {
                    ADD_FAILURE() << "golden line " << r->line << ": bad K entry " << q << " " << r->term;
                    continue;
                }
                const Eigen::VectorXd row = cd->row(std::size_t(i));
                ck.real("k", q, r->term, row[m - 1], r->value, 1e-13, 1e-9, true);
            } else {
                ADD_FAILURE() << "golden line " << r->line << ": unknown coding quantity '" << q << "'";
            }
        }

        // --- coding-independent quantities, checked under every coding
        const double rss = cell(tests, std::size_t(std::max(0L, tests_row(tests, "residual", ""))), "sum_sq");
        EXPECT_GE(tests_row(tests, "residual", ""), 0) << "tests_report has no residual row";
        for (const auto* r : fixed) {
            const std::string& q = r->quantity;
            const std::string& t = r->term;
            const int lv = index_of(t, "level:");
            const bool level_ok = lv >= 1 && std::size_t(lv) <= L;
            auto need_level = [&] {
                if (!level_ok) ADD_FAILURE() << "golden line " << r->line << ": bad level term " << t;
                return level_ok;
            };
            if (q == "n_obs") {
                ck.exact("count", q, t, double(s.rows_used()), r->value);
                ck.exact("count", q + " (fit)", t, double(f.rows()), r->value);
                if (g.rows_used >= 0) ck.exact("count", "rows used (header)", t, double(s.rows_used()), double(g.rows_used));
            } else if (q == "n_levels") {
                ck.exact("count", q, t, cell(summ, 0, "levels"), r->value);
            } else if (q == "level_label") {
                if (need_level()) {
                    ck.text("label", q, t, f.level_label(lv - 1), r->text);
                    ck.text("label", q + " (levels_report)", t,
                            text_of(levs.rows[lv - 1][col(levs, "level")]), r->text);
                }
            } else if (q == "level_n") {
                if (need_level()) ck.exact("count", q, t, cell(levs, lv - 1, "n"), r->value);
            } else if (q == "level_weight_sum") {
                if (need_level()) ck.real("level_weight_sum", q, t, cell(levs, lv - 1, "weight_sum"), r->value, 0);
            } else if (q == "level_mean") {
                if (need_level()) ck.real("level_mean", q, t, cell(levs, lv - 1, "mean"), r->value, 0);
            } else if (starts_with(q, "drop1_")) {
                const long row = tests_row(tests, t, "f_test");
                if (row < 0) {
                    ADD_FAILURE() << ck.where(q, t) << ": tests_report has no f_test row for " << t;
                    continue;
                }
                if (q == "drop1_df") ck.exact("count", q, t, cell(tests, row, "df"), r->value);
                else if (q == "drop1_ss") {
                    // R forms it as RSS(without the term) - RSS: rounding of the larger RSS.
                    double rss_drop = NAN;
                    for (const auto* o2 : fixed)
                        if (o2->quantity == "drop1_rss" && o2->term == t) rss_drop = o2->value;
                    ck.real("drop1_ss", q, t, cell(tests, row, "sum_sq"), r->value,
                            std::isnan(rss_drop) ? 0 : 1e-12 * rss_drop);
                } else if (q == "drop1_rss") {
                    ck.real("drop1_rss", q, t, cell(tests, row, "sum_sq") + rss, r->value, 0);
                } else if (q == "drop1_F") {
                    ck.real("drop1_F", q, t, cell(tests, row, "f_stat"), r->value, 0);
                } else if (q == "drop1_p") {
                    ck.pvalue(q, t, cell(tests, row, "p_value"), r->value);
                } else {
                    ADD_FAILURE() << "golden line " << r->line << ": unknown quantity '" << q << "'";
                }
            } else if (q == "residual_df") {
                ck.exact("count", q, t, cell(summ, 0, "df_resid"), r->value);
            } else if (q == "rss") {
                ck.real("rss", q, t, rss, r->value, 0);
            } else if (q == "r_squared") {
                ck.real("r_squared", q, t, cell(summ, 0, "r_squared"), r->value, 0);
            } else if (q == "adj_r_squared") {
                ck.real("adj_r_squared", q, t, cell(summ, 0, "adj_r_squared"), r->value, 0);
            } else if (q == "sigma") {
                ck.real("sigma", q, t, cell(summ, 0, "resid_sd"), r->value, 0);
            } else if (q == "f_stat") {
                ck.real("f_stat", q, t, cell(summ, 0, "f_stat"), r->value, 0);
            } else if (q == "f_num_df") {
                ck.exact("count", q, t, cell(summ, 0, "df_model"), r->value);
            } else if (q == "f_den_df") {
                ck.exact("count", q, t, cell(summ, 0, "df_resid"), r->value);
            } else if (q == "f_p") {
                ck.pvalue(q, t, cell(summ, 0, "p_value"), r->value);
            } else if (q == "loglik") {
                ck.real("loglik", q, t, cell(summ, 0, "log_lik"), r->value, 0);
            } else if (q == "loglik_df") {
                ck.exact("count", q, t, cell(summ, 0, "rank") + 1, r->value);
            } else if (q == "aic") {
                ck.real("aic", q, t, cell(summ, 0, "aic"), r->value, 0);
            } else if (q == "bic") {
                ck.real("bic", q, t, cell(summ, 0, "bic"), r->value, 0);
            } else if (q == "covariate_mean") {
                int j = -1;
                for (int c = 0; c < p; ++c)
                    if (g.covariates[c] == t) j = c;
                if (j < 0) {
                    ADD_FAILURE() << "golden line " << r->line << ": unknown covariate " << t;
                    continue;
                }
                ck.real("covariate_mean", q, t, f.covariate_mean(j), r->value, 0);
            } else if (q == "adjusted_mean") {
                if (need_level()) ck.real("adjusted_mean", q, t, cell(levs, lv - 1, "adjusted_mean"), r->value, 0);
            } else if (q == "adjusted_mean_se") {
                if (need_level()) ck.real("adjusted_mean_se", q, t, cell(levs, lv - 1, "std_error"), r->value, 0);
            } else if (starts_with(q, "welch_")) {
                const long row = tests_row(tests, "g", "welch_f_test");
                if (row < 0) {
                    ADD_FAILURE() << ck.where(q, t) << ": tests_report has no welch_f_test row";
                    continue;
                }
                if (q == "welch_F") ck.real("welch", q, t, cell(tests, row, "f_stat"), r->value, 0);
                else if (q == "welch_num_df") ck.exact("count", q, t, cell(tests, row, "df"), r->value);
                else if (q == "welch_den_df") ck.real("welch", q, t, cell(tests, row, "df_denom"), r->value, 0);
                else if (q == "welch_p") ck.pvalue(q, t, cell(tests, row, "p_value"), r->value);
                else ADD_FAILURE() << "golden line " << r->line << ": unknown quantity '" << q << "'";
            } else {
                ADD_FAILURE() << "golden line " << r->line << ": unknown quantity '" << q << "'";
            }
        }
    }

    dataset_counts()[name] = ck.count;
    std::printf("[oracle] %-16s %6ld comparisons over %zu codings (source: %s)\n", name.c_str(),
                ck.count, combos.size(), kSource);
    for (const auto& [kind, st] : ck.stats)
        std::printf("[oracle]     %-18s n=%5ld  max rel err %.3g  max err/tol %.3g\n", kind.c_str(),
                    st.count, st.max_rel, st.max_use);
    EXPECT_GT(ck.count, 0) << name << ": nothing compared";
}

INSTANTIATE_TEST_SUITE_P(RGolden, Oracle, ::testing::ValuesIn(datasets_to_test()),
                         [](const ::testing::TestParamInfo<std::string>& i) {
                             std::string n = i.param;
                             for (auto& c : n)
                                 if (!std::isalnum(static_cast<unsigned char>(c))) c = '_';
                             return n;
                         });

// The md5 used to pin datasets/deliveries.csv is itself checked against the
// RFC 1321 test suite, so that a mismatch message can be trusted.
TEST(OracleSupport, Md5MatchesRfc1321Vectors) {
    EXPECT_EQ(md5_hex(""), "d41d8cd98f00b204e9800998ecf8427e");
    EXPECT_EQ(md5_hex("abc"), "900150983cd24fb0d6963f7d28e17f72");
    EXPECT_EQ(md5_hex("12345678901234567890123456789012345678901234567890123456789012345678901234567890"),
              "57edf4a22be3c955ac49da2e2107b67a");
}

// Prints the largest errors over all datasets when the run ends.
class OracleReport : public ::testing::Environment {
public:
    void TearDown() override {
        if (global_stats().empty()) return;
        long total = 0;
        for (const auto& [n, c] : dataset_counts()) total += c;
        std::printf("[oracle] all datasets: %ld comparisons (source: %s)\n", total, kSource);
        for (const auto& [kind, st] : global_stats())
            std::printf("[oracle]     %-18s n=%6ld  max rel err %.3g  max err/tol %.3g  at %s\n",
                        kind.c_str(), st.count, st.max_rel, st.max_use, st.max_rel_where.c_str());
    }
};
const auto* const oracle_report_env = ::testing::AddGlobalTestEnvironment(new OracleReport);

}  // namespace
