// Crossed factors (core/factorial.hpp) against the outside world.
//
// Oracle: R 4.2 lm with sum-to-zero contrasts, car::Anova (Type II and III),
// drop1 (Type III with an empty cell), anova (Type I and the homogeneity-of-
// slopes comparison) and emmeans (cell and marginal means, Tukey comparisons),
// through tests/oracle/make_cross_golden.R and its golden files
// tests/oracle/golden/cross_*.csv (data in tests/oracle/data/cross_*.csv).
// Tolerances: tests, sums of squares, F and p to 1e-9 relative; means and
// standard errors to 1e-8; Tukey adjusted p-values to 1e-6 absolute (R's
// ptukey is itself accurate to about that).
// Property tests (common practice): Type I = II = III on a balanced design;
// Type III the same under every coding; results invariant to level order and
// to row order.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <fstream>
#include <functional>
#include <limits>
#include <map>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "golden_csv.hpp"
#include "error.hpp"
#include "factorial.hpp"
#include "fit.hpp"
#include "report.hpp"
#include "options.hpp"
#include "summary.hpp"

using namespace groupfit;

namespace {

using gf_golden::split;

const std::string oracle_dir = std::string(GROUPFIT_SOURCE_DIR) + "/tests/oracle";


struct dataset {
    std::vector<std::string> header;
    std::vector<std::vector<std::string>> rows;
};

dataset read_data(const std::string& name) {
    std::ifstream in(oracle_dir + "/data/cross_" + name + ".csv");
    EXPECT_TRUE(in.good()) << "missing data for " << name;
    dataset d;
    std::string line;
    std::getline(in, line);
    d.header = split(line, ",");
    while (std::getline(in, line))
        if (!line.empty()) d.rows.push_back(split(line, ","));
    return d;
}

struct golden_row {
    std::string what, label, stat;
    double value;
};

std::vector<golden_row> read_golden(const std::string& name) {
    std::ifstream in(oracle_dir + "/golden/cross_" + name + ".csv");
    EXPECT_TRUE(in.good()) << "missing golden file for " << name;
    std::vector<golden_row> out;
    std::string line;
    while (std::getline(in, line)) {
        if (line.empty() || line[0] == '#' || line.rfind("case,", 0) == 0) continue;
        auto f = split(line, ",");
        // NA: R has no value (a test with no degrees of freedom): groupfit gives NULL.
        out.push_back({f.at(1), f.at(2), f.at(3),
                       f.at(4) == "NA" ? std::numeric_limits<double>::quiet_NaN() : std::stod(f.at(4))});
    }
    return out;
}

level parse_level(const std::string& s) {
    char* end = nullptr;
    const double v = std::strtod(s.c_str(), &end);
    if (!s.empty() && end == s.c_str() + s.size()) return level::from_real(v);
    return level::from_text(s);
}

/// Builds the summary of a data set: factors are the columns between y and x.
/// `relabel` maps level text to other text (level-order tests).
summary build(const dataset& d, int factors, bool covariate,
              const std::map<std::string, std::string>& relabel = {},
              std::vector<std::size_t> order = {}) {
    summary s(covariate ? 1 : 0, false);
    limits lim;
    if (order.empty())
        for (std::size_t i = 0; i < d.rows.size(); ++i) order.push_back(i);
    for (std::size_t i : order) {
        const auto& r = d.rows[i];
        std::vector<level> parts;
        for (int k = 0; k < factors; ++k) {
            std::string v = r[1 + k];
            auto it = relabel.find(v);
            parts.push_back(it != relabel.end() ? level::from_text(it->second) : parse_level(v));
        }
        const std::size_t c = s.cell_for(level::from_blob(encode_cross(parts)), lim);
        double vals[2];
        int j = 0;
        if (covariate) vals[j++] = std::stod(r[1 + factors]);
        vals[j] = std::stod(r[0]);
        s.add_row(c, vals, 1.0);
    }
    return s;
}

double as_double(const value& v) {
    if (const double* d = std::get_if<double>(&v)) return *d;
    if (const auto* i = std::get_if<std::int64_t>(&v)) return double(*i);
    return std::numeric_limits<double>::quiet_NaN();
}
std::string as_text(const value& v) {
    if (const auto* s = std::get_if<std::string>(&v)) return *s;
    return {};
}
int column(const table& t, const std::string& name) {
    for (std::size_t c = 0; c < t.columns.size(); ++c)
        if (t.columns[c] == name) return int(c);
    ADD_FAILURE() << "no column " << name;
    return 0;
}

void expect_close(double got, double want, double rel, double abs, const std::string& what) {
    if (std::isnan(want)) {
        EXPECT_TRUE(std::isnan(got)) << what << ": R has NA, groupfit " << got;
        return;
    }
    const double tol = std::max(abs, rel * std::fabs(want));
    EXPECT_NEAR(got, want, tol) << what;
}

const std::vector<std::string>& row_of(const table& t, const std::string& col1, const std::string& v1,
                                       const std::string& col2 = {}, const std::string& v2 = {}) {
    static const std::vector<std::string> none;
    const int a = column(t, col1), b = col2.empty() ? -1 : column(t, col2);
    static std::vector<std::string> texts;
    for (const auto& r : t.rows)
        if (as_text(r[a]) == v1 && (b < 0 || as_text(r[b]) == v2)) {
            texts.clear();
            for (const auto& v : r) texts.push_back(as_text(v));
            return texts;
        }
    return none;
}

const std::vector<value>* find_row(const table& t, const std::string& col1, const std::string& v1,
                                   const std::string& col2 = {}, const std::string& v2 = {}) {
    const int a = column(t, col1), b = col2.empty() ? -1 : column(t, col2);
    for (const auto& r : t.rows)
        if (as_text(r[a]) == v1 && (b < 0 || as_text(r[b]) == v2)) return &r;
    return nullptr;
}

struct case_spec {
    std::string name;
    int factors;
    bool covariate;
    std::string extra;  // options beyond names=
};

std::string names_option(int factors, bool covariate) {
    static const char* f[] = {"a", "b", "c"};
    std::string s = "names=";
    for (int k = 0; k < factors; ++k) s += (k ? ", " : "") + std::string(f[k]);
    if (covariate) s += ", x";
    return s;
}

/// R's name of a dummy coefficient from ours: term "a × b", label "6/1" -> "a6:b1".
std::string r_coef_name(const std::string& term, const std::string& label) {
    if (term == "intercept") return "(Intercept)";
    if (label == "slope") return term;
    std::vector<std::string> terms, labels;
    std::string t = term;
    const std::string times = " \u00d7 ";
    for (std::size_t pos; (pos = t.find(times)) != std::string::npos; t = t.substr(pos + times.size()))
        terms.push_back(t.substr(0, pos));
    terms.push_back(t);
    labels = split(label, "/");
    std::string out;
    for (std::size_t i = 0; i < terms.size(); ++i)
        out += (i ? ":" : "") + terms[i] + (i < labels.size() ? labels[i] : "");
    return out;
}

void check_case(const case_spec& cs) {
    SCOPED_TRACE(cs.name);
    const dataset d = read_data(cs.name);
    const summary s = build(d, cs.factors, cs.covariate);
    const std::vector<golden_row> g = read_golden(cs.name);
    const std::string base = names_option(cs.factors, cs.covariate) + cs.extra;
    int checks = 0;
    for (int ss = 1; ss <= 3; ++ss) {
        const table t = cross_tests_report(s, parse_options(base + "; ss=" + std::to_string(ss)));
        for (const golden_row& r : g) {
            if (r.what != "test" + std::to_string(ss)) continue;
            const auto* row = find_row(t, "term", r.label, "method", "f_test");
            ASSERT_NE(row, nullptr) << "ss=" << ss << " no row for " << r.label;
            const double got = as_double((*row)[column(t, r.stat)]);
            expect_close(got, r.value, 1e-9, r.stat == "p_value" ? 1e-15 : 1e-12,
                         "ss=" + std::to_string(ss) + " " + r.label + " " + r.stat);
            ++checks;
        }
        for (const golden_row& r : g) {
            if (r.what == "resid") {
                const auto* row = find_row(t, "term", "residual");
                ASSERT_NE(row, nullptr);
                expect_close(as_double((*row)[column(t, r.stat)]), r.value, 1e-9, 1e-12, "residual " + r.stat);
                ++checks;
            }
            if (r.what == "homogeneity" && ss == 3) {
                const auto* row = find_row(t, "method", "homogeneity_of_slopes");
                ASSERT_NE(row, nullptr) << "no homogeneity row";
                expect_close(as_double((*row)[column(t, r.stat)]), r.value, 1e-9, 1e-15,
                             "homogeneity " + r.stat);
                ++checks;
            }
        }
    }
    // Cell and marginal means.
    for (const char* how : {"equal", "proportional"}) {
        const table t = cross_levels_report(s, parse_options(base + "; means=" + how));
        for (const golden_row& r : g) {
            const bool cell = r.what == "cell";
            if (!cell && r.what != how) continue;
            std::string term, label = r.label;
            if (cell) {
                term = cs.factors == 2 ? "a \u00d7 b" : "a \u00d7 b \u00d7 c";
            } else {
                term = label.substr(0, label.find('='));
                label = label.substr(label.find('=') + 1);
            }
            const auto* row = find_row(t, "term", term, "level", label);
            ASSERT_NE(row, nullptr) << "no level row " << term << " " << label;
            const std::string col = r.stat == "estimate" ? "adjusted_mean" : "std_error";
            expect_close(as_double((*row)[column(t, col)]), r.value, 1e-8, 1e-12,
                         std::string(how) + " " + r.label + " " + r.stat);
            if (!cell) EXPECT_EQ(as_text((*row)[column(t, "weighting")]), how);
            ++checks;
        }
    }
    // Tukey comparisons of the first factor's equal-weight marginal means.
    {
        const table t = cross_pairs_report(s, parse_options(base));
        for (const golden_row& r : g) {
            if (r.what != "pair_equal") continue;
            const auto ab = split(r.label, "|");
            const auto* row = find_row(t, "level_a", ab[0], "level_b", ab[1]);
            ASSERT_NE(row, nullptr) << "no pair " << r.label;
            const double got = as_double((*row)[column(t, r.stat)]);
            if (r.stat == "p_adjusted") expect_close(got, r.value, 0.0, 1e-6, "pair " + r.label);
            else expect_close(got, r.value, 1e-8, 1e-12, "pair " + r.label + " " + r.stat);
            ++checks;
        }
    }
    // Dummy (treatment) coefficients.
    {
        const table t = cross_coef_report(s, parse_options(base + "; coding=dummy"));
        std::map<std::string, const std::vector<value>*> by_name;
        for (const auto& row : t.rows)
            by_name[r_coef_name(as_text(row[column(t, "term")]), as_text(row[column(t, "label")]))] = &row;
        for (const golden_row& r : g) {
            if (r.what != "coef_dummy") continue;
            auto it = by_name.find(r.label);
            ASSERT_NE(it, by_name.end()) << "no coefficient " << r.label;
            expect_close(as_double((*it->second)[column(t, r.stat)]), r.value, 1e-8, 1e-11,
                         "coef " + r.label + " " + r.stat);
            ++checks;
        }
    }
    EXPECT_GT(checks, 10);
    ::testing::Test::RecordProperty("checks_" + cs.name, checks);
}

}  // namespace

TEST(CrossOracle, WarpbreaksBalancedTwoFactors) { check_case({"warpbreaks", 2, false, ""}); }
TEST(CrossOracle, ToothGrowthBalancedTwoFactors) { check_case({"toothgrowth", 2, false, ""}); }
TEST(CrossOracle, MtcarsUnbalancedWithCovariate) { check_case({"mtcars_cyl_am_wt", 2, true, ""}); }
TEST(CrossOracle, MtcarsEmptyCell) { check_case({"mtcars_cyl_gear_empty", 2, false, ""}); }
TEST(CrossOracle, InventedThreeFactors) { check_case({"invented3", 3, false, ""}); }
TEST(CrossOracle, InventedThreeFactorsWithCovariate) { check_case({"invented3_x", 3, true, ""}); }
TEST(CrossOracle, InventedMainEffectsOnly) { check_case({"invented3_main_x", 3, true, "; terms=main"}); }
TEST(CrossOracle, InventedTwoWay) { check_case({"invented3_two_way", 3, false, "; terms=two_way"}); }
TEST(CrossOracle, InventedSeparateSlopes) {
    check_case({"invented2_separate", 2, true, "; slopes=separate"});
}
TEST(CrossOracle, InventedEmptyCell) { check_case({"invented2_empty", 2, false, ""}); }

// One factor with a covariate: the homogeneity-of-slopes row of the one-factor
// tests table, and slopes=separate (R: anova of common vs separate slopes, and
// car::Anova type 3 with the covariate centred).
TEST(CrossOracle, OneFactorSlopes) {
    const dataset d = read_data("oneway");
    summary s(1, false);
    limits lim;
    for (const auto& r : d.rows) {
        const double v[2] = {std::stod(r[2]), std::stod(r[0])};
        s.add_row(s.cell_for(parse_level(r[1]), lim), v, 1.0);
    }
    const std::vector<golden_row> g = read_golden("oneway");
    const table common = tests_report(fit(s, parse_options("names=a, x")));
    const table sep = cross_tests_report(s, parse_options("names=a, x; slopes=separate"));
    int checks = 0;
    for (const golden_row& r : g) {
        if (r.what == "homogeneity") {
            const auto* row = find_row(common, "method", "homogeneity_of_slopes");
            ASSERT_NE(row, nullptr);
            EXPECT_EQ(as_text((*row)[column(common, "term")]), "a \u00d7 x");
            expect_close(as_double((*row)[column(common, r.stat)]), r.value, 1e-9, 1e-15, "homogeneity " + r.stat);
        } else {
            const auto* row = find_row(sep, "term", r.label, "method", "f_test");
            ASSERT_NE(row, nullptr) << r.label;
            expect_close(as_double((*row)[column(sep, r.stat)]), r.value, 1e-9, 1e-15, r.label + " " + r.stat);
        }
        ++checks;
    }
    EXPECT_EQ(checks, 16);
}

// --- empty cells: what is reported (common practice: a cell-means model with
// an empty cell cannot estimate the equal-weight marginal means that need it)
TEST(CrossEmpty, ReportsTheEmptyCellAndNullMeans) {
    const dataset d = read_data("invented2_empty");
    const summary s = build(d, 2, false);
    const options o = parse_options("names=a, b");
    const table sum = cross_summary_report(s, o);
    EXPECT_EQ(as_double(sum.rows[0][column(sum, "empty_cells")]), 1.0);
    EXPECT_EQ(as_text(sum.rows[0][column(sum, "empty_cell_labels")]), "west/plus");
    EXPECT_EQ(as_double(sum.rows[0][column(sum, "rank")]), 5.0);
    const table lv = cross_levels_report(s, o);
    const auto* west = find_row(lv, "term", "a", "level", "west");
    ASSERT_NE(west, nullptr);
    EXPECT_TRUE(std::holds_alternative<std::monostate>((*west)[column(lv, "adjusted_mean")]));
    EXPECT_NE(as_text((*west)[column(lv, "note")]).find("not estimable"), std::string::npos);
    const auto* north = find_row(lv, "term", "a", "level", "north");
    ASSERT_NE(north, nullptr);
    EXPECT_FALSE(std::holds_alternative<std::monostate>((*north)[column(lv, "adjusted_mean")]));
    const auto* empty = find_row(lv, "term", "a \u00d7 b", "level", "west/plus");
    ASSERT_NE(empty, nullptr);
    EXPECT_EQ(as_double((*empty)[column(lv, "n")]), 0.0);
    // Observed cells' means equal the observed means (no covariates).
    const auto* nb = find_row(lv, "term", "a \u00d7 b", "level", "north/basic");
    expect_close(as_double((*nb)[column(lv, "adjusted_mean")]), as_double((*nb)[column(lv, "mean")]),
                 1e-12, 0, "cell mean");
    // Proportional marginal means are the observed level means.
    const table lp = cross_levels_report(s, parse_options("names=a, b; means=proportional"));
    for (const auto& row : lp.rows)
        if (as_text(row[column(lp, "term")]) == "a")
            expect_close(as_double(row[column(lp, "adjusted_mean")]), as_double(row[column(lp, "mean")]),
                         1e-12, 0, "proportional mean");
    // The interaction is tested with 1 of 2 degrees of freedom, and says so.
    const table t = cross_tests_report(s, o);
    const auto* ab = find_row(t, "term", "a \u00d7 b");
    ASSERT_NE(ab, nullptr);
    EXPECT_EQ(as_double((*ab)[column(t, "df")]), 1.0);
    EXPECT_NE(as_text((*ab)[column(t, "note")]).find("tests 1 of 2"), std::string::npos);
    // Pairs involving the non-estimable mean: NULL with a reason, others fine.
    const table pr = cross_pairs_report(s, o);
    const auto* nw = find_row(pr, "level_a", "north", "level_b", "west");
    ASSERT_NE(nw, nullptr);
    EXPECT_TRUE(std::holds_alternative<std::monostate>((*nw)[column(pr, "estimate")]));
    EXPECT_NE(as_text((*nw)[column(pr, "note")]).find("not estimable"), std::string::npos);
    const auto* ns = find_row(pr, "level_a", "north", "level_b", "south");
    EXPECT_FALSE(std::holds_alternative<std::monostate>((*ns)[column(pr, "p_adjusted")]));
}

// --- properties (common practice)
namespace {
std::vector<double> numbers(const table& t, const std::vector<std::string>& cols) {
    std::vector<double> out;
    for (const auto& r : t.rows)
        for (const auto& c : cols) out.push_back(as_double(r[column(t, c)]));
    return out;
}
void expect_same(const std::vector<double>& a, const std::vector<double>& b, double rel, const std::string& what) {
    ASSERT_EQ(a.size(), b.size()) << what;
    for (std::size_t i = 0; i < a.size(); ++i) {
        if (std::isnan(a[i]) || std::isnan(b[i])) {
            EXPECT_EQ(std::isnan(a[i]), std::isnan(b[i])) << what << " entry " << i;
            continue;
        }
        expect_close(a[i], b[i], rel, 1e-13, what + " entry " + std::to_string(i));
    }
}
}  // namespace

TEST(CrossProperties, BalancedDesignTypesAgree) {
    const summary s = build(read_data("warpbreaks"), 2, false);
    std::vector<std::vector<double>> by_type;
    for (int ss = 1; ss <= 3; ++ss)
        by_type.push_back(numbers(cross_tests_report(s, parse_options("names=a, b; ss=" + std::to_string(ss))),
                                  {"df", "sum_sq", "f_stat", "p_value"}));
    expect_same(by_type[0], by_type[1], 1e-10, "type 1 vs 2");
    expect_same(by_type[0], by_type[2], 1e-10, "type 1 vs 3");
}

TEST(CrossProperties, TypeThreeDoesNotDependOnTheCoding) {
    const summary s = build(read_data("invented3_x"), 3, true);
    const auto ref = numbers(cross_tests_report(s, parse_options("names=a, b, c, x")),
                             {"df", "sum_sq", "f_stat", "p_value"});
    for (const char* c : {"effect", "weighted_effect", "helmert", "reverse_helmert", "successive", "polynomial"})
        expect_same(numbers(cross_tests_report(s, parse_options(std::string("names=a, b, c, x; coding=") + c)),
                            {"df", "sum_sq", "f_stat", "p_value"}),
                    ref, 0.0, c);
}

TEST(CrossProperties, InvariantToLevelOrderAndRowOrder) {
    const dataset d = read_data("invented2_empty");
    const summary s = build(d, 2, false);
    // Reverse the sort order of every level by renaming, and shuffle the rows.
    const std::map<std::string, std::string> rename = {
        {"north", "z_north"}, {"south", "y_south"}, {"west", "x_west"}, {"basic", "q_basic"}, {"plus", "p_plus"}};
    std::vector<std::size_t> order(d.rows.size());
    for (std::size_t i = 0; i < order.size(); ++i) order[i] = i;
    std::mt19937 rng(7);
    std::shuffle(order.begin(), order.end(), rng);
    const summary r = build(d, 2, false, rename, order);
    for (int ss = 1; ss <= 3; ++ss) {
        const std::string o = "names=a, b; ss=" + std::to_string(ss);
        expect_same(numbers(cross_tests_report(r, parse_options(o)), {"df", "sum_sq", "f_stat", "p_value"}),
                    numbers(cross_tests_report(s, parse_options(o)), {"df", "sum_sq", "f_stat", "p_value"}),
                    1e-10, "tests ss=" + std::to_string(ss));
    }
    // Means, matched by label.
    const table a = cross_levels_report(s, parse_options("names=a, b"));
    const table b = cross_levels_report(r, parse_options("names=a, b"));
    int matched = 0;
    for (const auto& row : a.rows) {
        std::string label = as_text(row[column(a, "level")]);
        std::string renamed;
        for (const auto& part : split(label, "/"))
            renamed += (renamed.empty() ? "" : "/") + rename.at(part);
        std::string term = as_text(row[column(a, "term")]);
        if (term == "a \u00d7 b") continue;  // cell labels swap order with the renaming; checked below
        const auto* other = find_row(b, "term", term, "level", renamed);
        ASSERT_NE(other, nullptr) << renamed;
        for (const char* c : {"adjusted_mean", "std_error"}) {
            const double x = as_double(row[column(a, c)]), y = as_double((*other)[column(b, c)]);
            EXPECT_EQ(std::isnan(x), std::isnan(y)) << label;
            if (!std::isnan(x)) expect_close(y, x, 1e-10, 1e-13, label + " " + c);
        }
        ++matched;
    }
    EXPECT_EQ(matched, 5);
}

// --- bad input
TEST(CrossErrors, ClearMessages) {
    const summary s = build(read_data("invented3"), 3, false);
    auto msg = [&](const std::string& o, table (*f)(const summary&, const options&)) {
        try {
            f(s, parse_options(o));
        } catch (const error& e) {
            return std::string(e.what());
        }
        return std::string("no error");
    };
    EXPECT_EQ(msg("names=a, b, c; by=d", cross_pairs_report),
              "options: by names 'd', which is not a factor of the model (factors: a, b, c)");
    EXPECT_EQ(msg("names=a, b, c; slopes=separate", cross_tests_report),
              "options: slopes=separate needs covariates; this model has none");
    EXPECT_EQ(msg("names=a, b, c; factor=e", cross_pairs_report),
              "options: factor names 'e', which is not a factor of the model (factors: a, b, c)");
    EXPECT_EQ(msg("names=a, b, c; factor=a; by=a", cross_pairs_report),
              "options: by= must name a factor other than factor=");
    EXPECT_EQ(msg("names=a, b, c; order=north", cross_tests_report),
              "options: order= applies to one-factor models; the levels of crossed factors are in "
              "ascending order");
    EXPECT_EQ(msg("names=a, b, c; coding=custom; custom=1,-1,0/0,1,-1", cross_coef_report),
              "options: coding=custom applies to one-factor models; crossed factors take dummy, "
              "effect, weighted_effect, helmert, reverse_helmert, successive or polynomial");
    EXPECT_EQ(msg("names=a, b, c; factor=cell; by=b", cross_pairs_report),
              "options: by= compares levels of factor= within levels of another factor; it cannot "
              "be combined with factor=cell");
    EXPECT_EQ(msg("names=a, b, c; by=b", [](const summary& m, const options& o) {
                  return cross_contrast_report(m, o, "north=1, south=-1");
              }),
              "options: by= applies to groupfit_pairs");
    EXPECT_EQ(msg("names=a, b, c; base=nowhere", cross_coef_report).rfind("options: base names an unknown level 'nowhere'", 0), 0u);
    for (const char* o : {"slopes=varying", "means=weighted", "factor=", "by=", "terms=all"}) {
        try {
            parse_options(o);
            ADD_FAILURE() << o << " accepted";
        } catch (const error& e) {
            EXPECT_EQ(std::string(e.what()).rfind("options: ", 0), 0u) << e.what();
        }
    }
    EXPECT_STREQ([] {
        try { parse_options("means=weighted"); } catch (const error& e) { return std::string(e.what()); }
        return std::string();
    }().c_str(), "options: means must be one of equal, proportional (not 'weighted')");
    EXPECT_STREQ([] {
        try { parse_options("slopes=varying"); } catch (const error& e) { return std::string(e.what()); }
        return std::string();
    }().c_str(), "options: slopes must be one of common, separate, cell (not 'varying')");
    EXPECT_THROW(parse_options("terms=all"), error);
    EXPECT_THROW(parse_options("slopes=varying"), error);
    EXPECT_THROW(parse_options("means=weighted"), error);
    // Mixed arity.
    summary m(0, false);
    limits lim;
    double y = 1.0;
    m.add_row(m.cell_for(level::from_blob(encode_cross({level::from_text("a"), level::from_text("b")})), lim), &y, 1.0);
    const std::size_t c = m.cell_for(
        level::from_blob(encode_cross({level::from_text("a"), level::from_text("b"), level::from_text("c")})), lim);
    EXPECT_THROW(check_same_factors(m, c), error);
    EXPECT_THROW(crossed_factors(m), error);
}

// Both fitting paths refuse a summary without cells. Not reachable from SQL:
// the reports there stop earlier with "the model has no usable rows (...)"
// (test_sql AllRowsNullGiveAModelWithoutUsableRows), so the guards are met by
// calling the core directly.
TEST(CrossErrors, NoCellsIsAnErrorOnBothPaths) {
    const summary empty(1, false);
    auto msg = [](const std::function<void()>& f) {
        try {
            f();
        } catch (const error& e) {
            return std::string(e.what());
        }
        return std::string("no error");
    };
    EXPECT_EQ(msg([&] { const fit f(empty, parse_options("")); }), "the model has no rows");
    EXPECT_EQ(msg([&] { cross_tests_report(empty, parse_options("")); }), "the model has no rows");
    EXPECT_EQ(msg([&] { cross_levels_report(empty, parse_options("slopes=separate")); }), "the model has no rows");
    // One row is enough for both.
    summary one(1, false);
    limits lim;
    const double row[2] = {0.5, 2.0};  // x, y
    one.add_row(one.cell_for(level::from_text("a"), lim), row, 1.0);
    EXPECT_EQ(msg([&] { const fit f(one, parse_options("")); }), "no error");
    EXPECT_EQ(msg([&] { cross_levels_report(one, parse_options("")); }), "no error");
}

// The caps on a crossed model: level combinations and design columns.
TEST(CrossErrors, CapsOnCombinationsAndColumns) {
    limits lim;
    lim.max_levels = 10000;
    auto build_grid = [&](int la, int lb, bool diagonal) {
        summary s(0, false);
        double y = 1.0;
        for (int i = 0; i < la; ++i)
            for (int j = 0; j < lb; ++j) {
                if (diagonal && j != i % lb) continue;
                y += 0.5;
                s.add_row(s.cell_for(level::from_blob(encode_cross({level::from_integer(i), level::from_integer(j)})), lim), &y, 1.0);
            }
        return s;
    };
    // 1001 x 1001 combinations from 1001 observed cells.
    summary wide(0, false);
    double y = 1.0;
    for (int i = 0; i < 1001; ++i) {
        y += 1;
        wide.add_row(wide.cell_for(level::from_blob(encode_cross({level::from_integer(i), level::from_integer(i)})), lim), &y, 1.0);
    }
    try {
        cross_tests_report(wide, parse_options(""));
        ADD_FAILURE() << "no error";
    } catch (const error& e) {
        EXPECT_EQ(std::string(e.what()), "the crossed factors have more than 1000000 combinations of levels; "
                                         "cross fewer factors or levels");
    }
    // 70 x 60 full factorial: 4200 design columns.
    const summary big = build_grid(70, 60, true);
    try {
        cross_tests_report(big, parse_options(""));
        ADD_FAILURE() << "no error";
    } catch (const error& e) {
        EXPECT_EQ(std::string(e.what()), "the model has 4200 design columns; the limit is 4000 (use "
                                         "terms=main or terms=two_way, or fewer levels)");
    }
    // Main effects only fit.
    EXPECT_NO_THROW(cross_tests_report(big, parse_options("terms=main")));
}

TEST(CrossEncoding, RoundTripsAndRejectsForeignBlobs) {
    const std::vector<level> parts = {level::from_integer(-3), level::from_real(2.5), level::from_text("x/y"),
                                      level::from_blob(std::string("\0\1", 2))};
    std::vector<level> back;
    ASSERT_TRUE(decode_cross(encode_cross(parts), back));
    ASSERT_EQ(back.size(), parts.size());
    for (std::size_t i = 0; i < parts.size(); ++i) EXPECT_TRUE(back[i] == parts[i]);
    EXPECT_FALSE(decode_cross("GFx1", back));
    std::string e = encode_cross(parts);
    EXPECT_FALSE(decode_cross(e + "z", back));
    EXPECT_FALSE(decode_cross(e.substr(0, e.size() - 1), back));
    // 3.0 and 3 name the same level.
    EXPECT_EQ(encode_cross({level::from_real(3.0), level::from_text("a")}),
              encode_cross({level::from_integer(3), level::from_text("a")}));
}
