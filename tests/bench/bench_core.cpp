// groupfit benchmarks: the numeric core, without SQLite.
//
//   build/release/tests/bench/bench_core                      everything
//   build/release/tests/bench/bench_core --benchmark_filter=BM_Report
//
// What is measured (see README.md beside this file for the targets):
//   BM_RowUpdate/p/L     summary::cell_for (text key such as "g17", looked up the
//                        way the aggregate does) + summary::add_row, per row, for
//                        p covariates and L levels; rows pre-generated, levels in
//                        random order; items_per_second = rows per second.
//   BM_RowBatch/p/L      the same rows through row_batch + summary::add_batch
//                        (the aggregate's path once the levels' state passes
//                        256 KiB).
//   BM_Merge             summary::merge of 1,000 models (100 levels, 2
//                        covariates each) into one empty model.
//   BM_MergeBlobs        the same from serialized BLOBs (the first decoded, the
//                        rest merged from their bytes), i.e. the work of the
//                        groupfit_merge aggregate before it writes its BLOB.
//   BM_Fit/L             fit construction (default options), 2 covariates.
//   BM_Report_<r>/.../L  fit + one report (coef, levels, deviations, tests,
//                        summary), 2 covariates; coef also with coding=effect
//                        and coding=helmert; levels also at 1,000 and 10,000
//                        levels to show scaling.
//   BM_Serialize/Deserialize   the BLOB round trip of a 100-level, 2-covariate
//                        model (bytes_per_second is the BLOB size per second).
// A report call from SQL costs about Deserialize + parse options + Fit + report.
//
// Data are deterministic (splitmix64 with fixed seeds): y = level effect +
// x'beta + noise, x uniform on [0, 10). Nothing here asserts a timing.
#include <benchmark/benchmark.h>

#include <cstdint>
#include <map>
#include <string>
#include <tuple>
#include <utility>
#include <vector>

#include "compare.hpp"
#include "multcomp.hpp"
#include "factorial.hpp"
#include "fit.hpp"
#include "options.hpp"
#include "report.hpp"
#include "summary.hpp"

namespace {

using groupfit::level_kind;
using groupfit::limits;
using groupfit::summary;

/* splitmix64: a fixed-seed generator whose stream is the same everywhere. */
struct rng {
    std::uint64_t s;
    std::uint64_t next() {
        std::uint64_t z = (s += 0x9E3779B97F4A7C15ull);
        z = (z ^ (z >> 30)) * 0xBF58476D1CE4E5B9ull;
        z = (z ^ (z >> 27)) * 0x94D049BB133111EBull;
        return z ^ (z >> 31);
    }
    double uniform() { return double(next() >> 11) * 0x1.0p-53; }  // [0, 1)
    double noise() { return uniform() + uniform() + uniform() - 1.5; }  // mean 0, sd 0.5
};

/* Pre-generated rows: the level of each row (index into labels) and its
** values x1..xp, y, laid out as summary::add_row expects them. */
struct rows_data {
    int p = 0;
    std::vector<std::string> labels;  // "g0", "g1", ...
    std::vector<std::uint32_t> level;
    std::vector<double> values;       // rows x (p + 1)
    std::size_t size() const { return level.size(); }
};

double level_effect(std::size_t g) { return 1.0 + double((g * 37) % 101) / 10.0; }
double slope(int j) { return (j % 2 ? -0.5 : 1.0) * (j + 1); }

rows_data make_rows(std::size_t rows, int p, std::size_t levels, std::uint64_t seed,
                    bool balanced = false) {
    rows_data d;
    d.p = p;
    for (std::size_t g = 0; g < levels; ++g) d.labels.push_back("g" + std::to_string(g));
    d.level.reserve(rows);
    d.values.reserve(rows * (p + 1));
    rng r{seed};
    for (std::size_t i = 0; i < rows; ++i) {
        const std::size_t g = balanced ? i % levels : r.next() % levels;
        d.level.push_back(static_cast<std::uint32_t>(g));
        double y = level_effect(g) + r.noise();
        for (int j = 0; j < p; ++j) {
            const double x = 10.0 * r.uniform();
            y += slope(j) * x;
            d.values.push_back(x);
        }
        d.values.push_back(y);
    }
    return d;
}

/* Feeds rows into a summary exactly as the aggregate's step does. */
void feed(summary& s, const rows_data& d, const limits& lim) {
    const std::size_t w = d.p + 1;
    for (std::size_t i = 0; i < d.size(); ++i) {
        const std::string& key = d.labels[d.level[i]];
        const std::size_t c = s.cell_for(level_kind::text, key.data(), key.size(), lim);
        s.add_row(c, &d.values[i * w], 1.0);
    }
}

/* A model with `levels` levels, p covariates and rows_per_level rows in every
** level (every level sees all of them, so each factor has full rank). */
summary make_model(std::size_t levels, int p, std::size_t rows_per_level, std::uint64_t seed) {
    limits lim;
    lim.max_levels = 10000000;
    summary s(p, false);
    feed(s, make_rows(levels * rows_per_level, p, levels, seed, true), lim);
    return s;
}

/* Built once per shape and reused by every benchmark that asks for it. */
const summary& cached_model(std::size_t levels, int p) {
    static std::map<std::pair<std::size_t, int>, summary> cache;
    auto key = std::make_pair(levels, p);
    auto it = cache.find(key);
    if (it == cache.end()) it = cache.emplace(key, make_model(levels, p, 20, 42 + levels)).first;
    return it->second;
}

limits big_limits() {
    limits lim;
    lim.max_levels = 10000000;
    return lim;
}

// ------------------------------------------------------------------ row update

// Batched: the rows go through row_batch + summary::add_batch, the path the
// aggregate takes once the levels' state passes 256 KiB (wants_batches).
template <bool Batched>
void rows_benchmark(benchmark::State& state) {
    const int p = static_cast<int>(state.range(0));
    const auto levels = static_cast<std::size_t>(state.range(1));
    const std::size_t n = 1u << 16;
    const rows_data d = make_rows(n, p, levels, 7);
    const limits lim = big_limits();
    summary s(p, false);
    groupfit::row_batch b(p);
    const std::size_t w = p + 1;
    std::size_t i = 0;
    for (auto _ : state) {
        const std::string& key = d.labels[d.level[i]];
        if constexpr (Batched) {
            b.push(level_kind::text, key.data(), key.size(), &d.values[i * w], 1.0);
            if (b.full()) s.add_batch(b, lim);
        } else {
            s.add_row(s.cell_for(level_kind::text, key.data(), key.size(), lim), &d.values[i * w], 1.0);
        }
        if (++i == n) i = 0;
    }
    if (Batched) s.add_batch(b, lim);
    benchmark::DoNotOptimize(s.rows_used());
    state.SetItemsProcessed(state.iterations());
    state.counters["cells"] = static_cast<double>(s.cells());
}
void BM_RowUpdate(benchmark::State& state) { rows_benchmark<false>(state); }
void BM_RowBatch(benchmark::State& state) { rows_benchmark<true>(state); }
BENCHMARK(BM_RowUpdate)
    ->ArgNames({"p", "levels"})
    ->ArgsProduct({{0, 2, 8}, {4, 100, 10000}});
BENCHMARK(BM_RowBatch)
    ->ArgNames({"p", "levels"})
    ->ArgsProduct({{0, 2, 8}, {4, 100, 10000}});

// ----------------------------------------------------------------------- merge

constexpr std::size_t merge_models = 1000;

const std::vector<summary>& merge_inputs() {
    static const std::vector<summary> models = [] {
        std::vector<summary> m;
        m.reserve(merge_models);
        for (std::size_t k = 0; k < merge_models; ++k) m.push_back(make_model(100, 2, 5, 1000 + k));
        return m;
    }();
    return models;
}

void BM_Merge(benchmark::State& state) {
    const auto& models = merge_inputs();
    const limits lim = big_limits();
    for (auto _ : state) {
        summary into(2, false);
        for (const auto& m : models) into.merge(m, lim);
        benchmark::DoNotOptimize(into.cells());
    }
    state.SetItemsProcessed(state.iterations() * static_cast<std::int64_t>(models.size()));
    state.counters["models"] = static_cast<double>(models.size());
}
BENCHMARK(BM_Merge)->Unit(benchmark::kMillisecond);

void BM_MergeBlobs(benchmark::State& state) {
    std::vector<std::string> blobs;
    std::size_t bytes = 0;
    for (const auto& m : merge_inputs()) {
        blobs.push_back(m.serialize());
        bytes += blobs.back().size();
    }
    const limits lim = big_limits();
    for (auto _ : state) {
        // As the groupfit_merge aggregate does it: the first BLOB decoded,
        // every later one merged straight from its bytes.
        summary into = summary::deserialize(blobs.front(), lim);
        for (std::size_t i = 1; i < blobs.size(); ++i) into.merge_blob(blobs[i], lim);
        benchmark::DoNotOptimize(into.serialized_size());
    }
    state.SetItemsProcessed(state.iterations() * static_cast<std::int64_t>(blobs.size()));
    state.SetBytesProcessed(state.iterations() * static_cast<std::int64_t>(bytes));
    state.counters["models"] = static_cast<double>(blobs.size());
}
BENCHMARK(BM_MergeBlobs)->Unit(benchmark::kMillisecond);

// ------------------------------------------------------------ fit and reports

void BM_Fit(benchmark::State& state) {
    const summary& s = cached_model(static_cast<std::size_t>(state.range(0)), 2);
    const groupfit::options o = groupfit::parse_options("");
    for (auto _ : state) {
        const groupfit::fit f(s, o);
        benchmark::DoNotOptimize(f.sse());
    }
}
BENCHMARK(BM_Fit)->ArgName("levels")->Arg(100)->Arg(1000)->Arg(10000)->Unit(benchmark::kMicrosecond);

using report_fn = groupfit::table (*)(const groupfit::fit&, const summary&);

void run_report(benchmark::State& state, report_fn make, const char* options_text) {
    const summary& s = cached_model(static_cast<std::size_t>(state.range(0)), 2);
    const groupfit::options o = groupfit::parse_options(options_text);
    std::size_t rows = 0;
    for (auto _ : state) {
        const groupfit::fit f(s, o);
        groupfit::table t = make(f, s);
        rows = t.rows.size();
        benchmark::DoNotOptimize(t.rows.data());
    }
    state.counters["report_rows"] = static_cast<double>(rows);
}

groupfit::table coef(const groupfit::fit& f, const summary&) { return groupfit::coef_report(f); }
groupfit::table levels(const groupfit::fit& f, const summary&) { return groupfit::levels_report(f); }
groupfit::table deviations(const groupfit::fit& f, const summary&) {
    return groupfit::deviations_report(f);
}
groupfit::table tests(const groupfit::fit& f, const summary&) { return groupfit::tests_report(f); }
groupfit::table summary_rep(const groupfit::fit& f, const summary& s) {
    return groupfit::summary_report(f, s);
}

void BM_Report_coef(benchmark::State& state, const char* options_text) {
    run_report(state, coef, options_text);
}
void BM_Report_levels(benchmark::State& state) { run_report(state, levels, ""); }
void BM_Report_deviations(benchmark::State& state) { run_report(state, deviations, ""); }
void BM_Report_tests(benchmark::State& state) { run_report(state, tests, ""); }
void BM_Report_summary(benchmark::State& state) { run_report(state, summary_rep, ""); }

BENCHMARK_CAPTURE(BM_Report_coef, dummy, "")->ArgName("levels")->Arg(100)->Unit(benchmark::kMicrosecond);
BENCHMARK_CAPTURE(BM_Report_coef, effect, "coding=effect")
    ->ArgName("levels")->Arg(100)->Unit(benchmark::kMicrosecond);
BENCHMARK_CAPTURE(BM_Report_coef, helmert, "coding=helmert")
    ->ArgName("levels")->Arg(100)->Unit(benchmark::kMicrosecond);
BENCHMARK(BM_Report_levels)
    ->ArgName("levels")->Arg(100)->Arg(1000)->Arg(10000)->Unit(benchmark::kMicrosecond);
BENCHMARK(BM_Report_deviations)->ArgName("levels")->Arg(100)->Unit(benchmark::kMicrosecond);
BENCHMARK(BM_Report_tests)->ArgName("levels")->Arg(100)->Unit(benchmark::kMicrosecond);
BENCHMARK(BM_Report_summary)->ArgName("levels")->Arg(100)->Unit(benchmark::kMicrosecond);

// ----------------------------------------------------------- comparisons
// Issue targets: Tukey-Kramer over a 100-level model (4,950 rows) and Dunnett
// for 50 treatments against a control, each under 200 ms.

groupfit::table pairs(const groupfit::fit& f, const summary&) { return groupfit::pairs_report(f); }

void BM_Pairs_tukey(benchmark::State& state) { run_report(state, pairs, ""); }
BENCHMARK(BM_Pairs_tukey)->ArgName("levels")->Arg(100)->Unit(benchmark::kMillisecond);

void BM_Pairs_dunnett(benchmark::State& state) { run_report(state, pairs, "vs=g0"); }
BENCHMARK(BM_Pairs_dunnett)->ArgName("levels")->Arg(11)->Arg(51)->Unit(benchmark::kMillisecond);

// Without covariates the correlation has product form (exact integral).
void BM_Pairs_dunnett_nocov(benchmark::State& state) {
    const summary& s = cached_model(static_cast<std::size_t>(state.range(0)), 0);
    const groupfit::options o = groupfit::parse_options("vs=g0");
    std::size_t rows = 0;
    for (auto _ : state) {
        const groupfit::fit f(s, o);
        groupfit::table t = groupfit::pairs_report(f);
        rows = t.rows.size();
        benchmark::DoNotOptimize(t.rows.data());
    }
    state.counters["report_rows"] = static_cast<double>(rows);
}
BENCHMARK(BM_Pairs_dunnett_nocov)->ArgName("levels")->Arg(51)->Unit(benchmark::kMillisecond);

// The studentized range alone: 4,950 upper tails for 100 means plus one quantile.
void BM_Srange_4950(benchmark::State& state) {
    std::vector<double> qs(4950);
    for (std::size_t i = 0; i < qs.size(); ++i) qs[i] = 9.0 * double((i * 7919) % 4950) / 4950.0;
    for (auto _ : state) {
        double sum = 0;
        for (double v : qs) sum += groupfit::dist::srange_upper_p(v, 100, 900);
        sum += groupfit::dist::srange_quantile(0.95, 100, 900);
        benchmark::DoNotOptimize(sum);
    }
}
BENCHMARK(BM_Srange_4950)->Unit(benchmark::kMillisecond);

void BM_Pairs_holm(benchmark::State& state) { run_report(state, pairs, "adjust=holm"); }
BENCHMARK(BM_Pairs_holm)->ArgName("levels")->Arg(100)->Unit(benchmark::kMillisecond);

// ----------------------------------------------------------- crossed factors
// A models of a x b crossed cells (every cell observed), 2 covariates.
const summary& cached_crossed(std::size_t a, std::size_t b) {
    static std::map<std::pair<std::size_t, std::size_t>, summary> cache;
    auto key = std::make_pair(a, b);
    auto it = cache.find(key);
    if (it != cache.end()) return it->second;
    const int p = 2;
    const rows_data d = make_rows(a * b * 20, p, a * b, 99, true);
    summary s(p, false);
    const limits lim = big_limits();
    std::vector<std::string> keys;
    for (std::size_t g = 0; g < a * b; ++g)
        keys.push_back(groupfit::encode_cross({groupfit::level::from_integer(std::int64_t(g / b)),
                                               groupfit::level::from_integer(std::int64_t(g % b))}));
    for (std::size_t i = 0; i < d.size(); ++i) {
        const std::string& k = keys[d.level[i]];
        s.add_row(s.cell_for(level_kind::blob, k.data(), k.size(), lim), &d.values[i * (p + 1)], 1.0);
    }
    return cache.emplace(key, std::move(s)).first->second;
}

using cross_fn = groupfit::table (*)(const summary&, const groupfit::options&);
void run_cross(benchmark::State& state, cross_fn make, const char* options_text) {
    const summary& s = cached_crossed(static_cast<std::size_t>(state.range(0)),
                                      static_cast<std::size_t>(state.range(1)));
    const groupfit::options o = groupfit::parse_options(options_text);
    std::size_t rows = 0;
    for (auto _ : state) {
        groupfit::table t = make(s, o);
        rows = t.rows.size();
        benchmark::DoNotOptimize(t.rows.data());
    }
    state.counters["report_rows"] = static_cast<double>(rows);
}
void BM_Cross_tests(benchmark::State& state) { run_cross(state, groupfit::cross_tests_report, ""); }
void BM_Cross_levels(benchmark::State& state) { run_cross(state, groupfit::cross_levels_report, ""); }
void BM_Cross_pairs_by(benchmark::State& state) {
    run_cross(state, groupfit::cross_pairs_report, "names=a, b; by=b");
}
BENCHMARK(BM_Cross_tests)->ArgNames({"a", "b"})->Args({5, 3})->Args({20, 10})->Unit(benchmark::kMillisecond);
BENCHMARK(BM_Cross_levels)->ArgNames({"a", "b"})->Args({5, 3})->Args({20, 10})->Unit(benchmark::kMillisecond);
BENCHMARK(BM_Cross_pairs_by)->ArgNames({"a", "b"})->Args({5, 3})->Args({20, 10})->Unit(benchmark::kMillisecond);

// ------------------------------------------------------------- BLOB round trip

void BM_Serialize(benchmark::State& state) {
    const summary& s = cached_model(100, 2);
    std::size_t bytes = 0;
    for (auto _ : state) {
        std::string blob = s.serialize();
        bytes = blob.size();
        benchmark::DoNotOptimize(blob.data());
    }
    state.SetBytesProcessed(state.iterations() * static_cast<std::int64_t>(bytes));
    state.counters["blob_bytes"] = static_cast<double>(bytes);
}
BENCHMARK(BM_Serialize)->Unit(benchmark::kMicrosecond);

void BM_Deserialize(benchmark::State& state) {
    const std::string blob = cached_model(100, 2).serialize();
    const limits lim;
    for (auto _ : state) {
        summary s = summary::deserialize(blob, lim);
        benchmark::DoNotOptimize(s.cells());
    }
    state.SetBytesProcessed(state.iterations() * static_cast<std::int64_t>(blob.size()));
    state.counters["blob_bytes"] = static_cast<double>(blob.size());
}
BENCHMARK(BM_Deserialize)->Unit(benchmark::kMicrosecond);

}  // namespace
