// Identities of the trade, checked as properties on random data.
// Source of every check here: common practice (standard algebra of linear
// models with coded categorical predictors), not a numeric reference.
#include <gtest/gtest.h>

#include <algorithm>
#include <cmath>
#include <random>

#include "coding.hpp"
#include "fit.hpp"
#include "report.hpp"
#include "summary.hpp"

using namespace groupfit;

namespace {

struct data_row {
    int g;
    std::vector<double> v;  // x1..xp, y
};

std::vector<data_row> random_rows(unsigned seed, int n, int p, int levels, bool balanced) {
    std::mt19937_64 rng(seed);
    std::normal_distribution<double> nd;
    std::vector<data_row> rows;
    for (int r = 0; r < n; ++r) {
        data_row d;
        d.g = balanced ? r % levels : static_cast<int>(rng() % (levels + 2)) % levels;
        double y = 2.0 * d.g + nd(rng) * (1 + 0.3 * d.g);
        for (int j = 0; j < p; ++j) {
            double x = 10 + d.g + 3 * nd(rng);
            d.v.push_back(x);
            y += (j + 1) * 0.7 * x;
        }
        d.v.push_back(y);
        rows.push_back(d);
    }
    return rows;
}

summary build(const std::vector<data_row>& rows, int p, bool weighted = false) {
    summary s(p, weighted);
    limits lim;
    for (const auto& r : rows)
        s.add_row(s.cell_for(level::from_text("lv" + std::to_string(r.g)), lim), r.v.data(), 1.0);
    return s;
}

double num(const value& v) { return std::holds_alternative<double>(v) ? std::get<double>(v) : NAN; }

int col(const table& t, const std::string& name) {
    auto it = std::find(t.columns.begin(), t.columns.end(), name);
    EXPECT_NE(it, t.columns.end()) << name;
    return static_cast<int>(it - t.columns.begin());
}

void expect_close(double a, double b, double rel, const std::string& what) {
    const double scale = std::max({std::fabs(a), std::fabs(b), 1e-300});
    EXPECT_LE(std::fabs(a - b) / scale, rel) << what << ": " << a << " vs " << b;
}

void expect_same_table(const table& a, const table& b, double rel, const std::string& what) {
    ASSERT_EQ(a.rows.size(), b.rows.size()) << what;
    for (std::size_t r = 0; r < a.rows.size(); ++r)
        for (std::size_t c = 0; c < a.columns.size(); ++c) {
            if (std::holds_alternative<double>(a.rows[r][c]))
                expect_close(num(a.rows[r][c]), num(b.rows[r][c]), rel,
                             what + " row " + std::to_string(r) + " " + a.columns[c]);
            else
                EXPECT_EQ(a.rows[r][c], b.rows[r][c]) << what << " row " << r << " " << a.columns[c];
        }
}

const char* all_codings[] = {
    "coding=dummy",         "coding=dummy; base=lv2",      "coding=effect",
    "coding=effect; base=lv0", "coding=weighted_effect",   "coding=helmert",
    "coding=reverse_helmert", "coding=successive",         "coding=polynomial",
    "coding=custom; custom=1,-1,0,0 / 0,1,-1,0 / 1,1,1,-3"};

}  // namespace

// Common practice: an effect-coded coefficient equals its level mean minus the
// unweighted mean of level means; the omitted level's deviation equals minus
// the sum of the others.
TEST(Identities, EffectCodingIsLevelMeanMinusMeanOfMeans) {
    const auto rows = random_rows(11, 300, 0, 4, false);
    const summary s = build(rows, 0);
    const fit f(s, parse_options("coding=effect"));
    const table coef = coef_report(f);
    double mean_of_means = 0;
    for (std::size_t i = 0; i < f.levels(); ++i) mean_of_means += f.level_mean(i) / f.levels();
    const int est = col(coef, "estimate");
    expect_close(num(coef.rows[0][est]), mean_of_means, 1e-13, "intercept");
    double sum = 0;
    for (std::size_t i = 1; i < f.levels(); ++i) {
        expect_close(num(coef.rows[i][est]), f.level_mean(i - 1) - mean_of_means, 1e-12, "coef");
        sum += num(coef.rows[i][est]);
    }
    const table dev = deviations_report(f);
    // Rows: two per level; the omitted (last) level's first row is its
    // deviation from the unweighted mean of level means.
    const double omitted = num(dev.rows[2 * (f.levels() - 1)][col(dev, "estimate")]);
    expect_close(omitted, -sum, 1e-12, "omitted level deviation");
    expect_close(omitted, f.level_mean(f.levels() - 1) - mean_of_means, 1e-12, "omitted vs means");
    // ... and the omitted level's mean is the intercept minus the others' sum.
    expect_close(num(coef.rows[0][est]) - sum, f.level_mean(f.levels() - 1), 1e-13, "omitted mean");
}

// Common practice: with equal group sizes the mean of level means equals the
// grand mean, so effect and weighted-effect codings coincide.
TEST(Identities, EqualSizesMeanOfMeansIsGrandMean) {
    const auto rows = random_rows(12, 400, 1, 4, true);
    const summary s = build(rows, 1);
    const table a = coef_report(fit(s, parse_options("coding=effect")));
    const table b = coef_report(fit(s, parse_options("coding=weighted_effect")));
    for (std::size_t r = 0; r < a.rows.size(); ++r)
        for (const char* c : {"estimate", "std_error"})
            expect_close(num(a.rows[r][col(a, c)]), num(b.rows[r][col(b, c)]), 1e-12, c);
}

// Common practice: the F test for the set of codes, and the whole analysis of
// variance table, are the same under every coding.
TEST(Identities, TestsTableIsTheSameUnderEveryCoding) {
    for (int p : {0, 2}) {
        const auto rows = random_rows(13 + p, 250, p, 4, false);
        const summary s = build(rows, p);
        for (int ss : {1, 2, 3}) {
            const std::string sso = "; ss=" + std::to_string(ss);
            const table ref = tests_report(fit(s, parse_options(std::string(all_codings[0]) + sso)));
            for (const char* c : all_codings)
                expect_same_table(ref, tests_report(fit(s, parse_options(c + sso))), 1e-12, c);
        }
    }
}

// Common practice: with no covariates the predicted (adjusted) level means are
// the observed level means.
TEST(Identities, NoCovariatesAdjustedMeansAreObservedMeans) {
    const summary s = build(random_rows(14, 200, 0, 4, false), 0);
    const table t = levels_report(fit(s, options{}));
    for (const auto& row : t.rows)
        expect_close(num(row[col(t, "adjusted_mean")]), num(row[col(t, "mean")]), 1e-14, "mean");
}

// Common practice: each coefficient equals its defining combination of
// adjusted level means (here at every covariate = 0), under every coding.
TEST(Identities, CoefficientsAreTheirCombinationOfAdjustedMeans) {
    const summary s = build(random_rows(15, 300, 2, 4, false), 2);
    for (const char* c : all_codings) {
        const fit f(s, parse_options(c));
        const coding cd(f);
        const table coef = coef_report(f);
        const Eigen::VectorXd zero = Eigen::VectorXd::Zero(2);
        std::vector<double> adj(f.levels());
        for (std::size_t i = 0; i < f.levels(); ++i) {
            Eigen::VectorXd k = Eigen::VectorXd::Zero(f.levels());
            k[i] = 1;
            adj[i] = f.evaluate(f.level_combination(k, zero)).value;
        }
        for (std::size_t r = 0; r < cd.size(); ++r) {
            const Eigen::VectorXd k = cd.row(r);
            double v = 0, scale = 0;
            for (std::size_t i = 0; i < f.levels(); ++i) v += k[i] * adj[i], scale += std::fabs(k[i] * adj[i]);
            const double got = num(coef.rows[r][col(coef, "estimate")]);
            EXPECT_LE(std::fabs(got - v), 1e-12 * scale) << c << " row " << r;
        }
    }
}

// Common practice: a summary merged from parts in any order equals one pass.
TEST(Identities, MergeInAnyOrderEqualsOnePass) {
    const auto rows = random_rows(16, 600, 2, 5, false);
    const summary whole = build(rows, 2);
    const table ref = coef_report(fit(whole, parse_options("coding=effect")));
    std::mt19937_64 rng(99);
    for (int trial = 0; trial < 5; ++trial) {
        std::vector<std::vector<data_row>> parts(4);
        for (const auto& r : rows) parts[rng() % 4].push_back(r);
        std::vector<int> order = {0, 1, 2, 3};
        std::shuffle(order.begin(), order.end(), rng);
        summary merged(2, false);
        for (int i : order) merged.merge(build(parts[i], 2), limits{});
        expect_same_table(ref, coef_report(fit(merged, parse_options("coding=effect"))), 1e-12,
                          "merged");
        expect_same_table(tests_report(fit(whole, options{})), tests_report(fit(merged, options{})),
                          1e-11, "merged tests");
    }
}

// Common practice: the row order does not change the fit.
TEST(Identities, RowOrderDoesNotChangeTheFit) {
    auto rows = random_rows(17, 400, 1, 4, false);
    const summary before = build(rows, 1);
    const table ref = coef_report(fit(before, options{}));
    std::mt19937_64 rng(5);
    std::shuffle(rows.begin(), rows.end(), rng);
    const summary after = build(rows, 1);
    expect_same_table(ref, coef_report(fit(after, options{})), 1e-12, "shuffled");
}

// Common practice: the level order (order=) does not change the tests, and a
// dummy coefficient is the same difference whichever order is used.
TEST(Identities, LevelOrderDoesNotChangeTheTests) {
    const summary s = build(random_rows(18, 300, 1, 4, false), 1);
    const table ref = tests_report(fit(s, options{}));
    const table other = tests_report(fit(s, parse_options("order=lv3,lv1,lv0,lv2")));
    expect_same_table(ref, other, 1e-12, "reordered");
}

// Common practice: analytic weights that are all 1 reproduce the unweighted
// fit; doubling every weight leaves estimates and standard errors unchanged.
TEST(Identities, UnitWeightsEqualUnweighted) {
    const auto rows = random_rows(19, 300, 2, 4, false);
    summary a(2, false), b(2, true), c(2, true);
    limits lim;
    for (const auto& r : rows) {
        const level lv = level::from_integer(r.g);
        a.add_row(a.cell_for(lv, lim), r.v.data(), 1.0);
        b.add_row(b.cell_for(lv, lim), r.v.data(), 1.0);
        c.add_row(c.cell_for(lv, lim), r.v.data(), 2.0);
    }
    const table ta = coef_report(fit(a, options{}));
    expect_same_table(ta, coef_report(fit(b, options{})), 1e-12, "unit weights");
    expect_same_table(ta, coef_report(fit(c, options{})), 1e-12, "doubled weights");
}

// Common practice: a covariate that is an exact linear combination of others
// is reported as aliased, the rank drops by one, and contrasts between levels
// stay estimable.
TEST(Identities, CollinearCovariateIsAliasedNotGuessed) {
    auto rows = random_rows(20, 200, 2, 3, false);
    for (auto& r : rows) r.v.insert(r.v.begin() + 2, 2 * r.v[0] - r.v[1]);  // x3 = 2 x1 - x2
    const summary s = build(rows, 3);
    const fit f(s, options{});
    EXPECT_FALSE(f.aliased(0));
    EXPECT_FALSE(f.aliased(1));
    EXPECT_TRUE(f.aliased(2));
    EXPECT_EQ(f.rank(), 3 + 2);
    const table coef = coef_report(f);
    EXPECT_TRUE(std::holds_alternative<std::monostate>(coef.rows.back()[col(coef, "estimate")]));
    EXPECT_FALSE(std::isnan(num(coef.rows[1][col(coef, "estimate")])));
}

// Common practice: a level's deviation from the unweighted mean of level
// means is its effect-coded coefficient (whose values and standard errors are
// checked against R's lm in test_oracle); and the all-levels-at-once
// deviations (fit::deviations_from, O(levels p^2)) equal the general
// evaluate of each level's linear function, with covariates, unequal sizes,
// and with an aliased covariate (which takes the general path).
TEST(Identities, DeviationsEqualEffectCodingAndTheGeneralEvaluate) {
    for (const int p : {0, 2}) {
        const auto rows = random_rows(21 + p, 500, p, 7, false);
        const summary s = build(rows, p);
        const fit f(s, parse_options("coding=effect"));
        const table coef = coef_report(f);
        const table dev = deviations_report(f);
        const int est = col(coef, "estimate"), se = col(coef, "std_error");
        for (std::size_t i = 0; i + 1 < f.levels(); ++i) {
            expect_close(num(dev.rows[2 * i][col(dev, "estimate")]), num(coef.rows[i + 1][est]), 1e-12,
                         "deviation vs effect coefficient");
            expect_close(num(dev.rows[2 * i][col(dev, "std_error")]), num(coef.rows[i + 1][se]), 1e-12,
                         "deviation SE vs effect coefficient SE");
        }
    }
    // An aliased covariate (x2 = 2 x1) and a weighted reference.
    std::vector<data_row> rows = random_rows(31, 400, 1, 5, false);
    for (auto& r : rows) r.v.insert(r.v.begin() + 1, 2.0 * r.v[0]);
    for (const auto& data : {random_rows(32, 400, 2, 5, false), rows}) {
        const summary s = build(data, 2);
        const fit f(s, parse_options(""));
        Eigen::VectorXd w(f.levels());
        for (std::size_t i = 0; i < f.levels(); ++i) w[i] = f.level_weight(i);
        w /= w.sum();
        const std::vector<estimate> fast = f.deviations_from(w);
        for (std::size_t i = 0; i < f.levels(); ++i) {
            Eigen::VectorXd k = -w;
            k[i] += 1.0;
            const estimate e = f.evaluate(f.level_combination(k, Eigen::VectorXd::Zero(2)));
            expect_close(fast[i].value, e.value, 1e-12, "deviation value");
            expect_close(fast[i].std_error, e.std_error, 1e-12, "deviation SE");
        }
    }
}
