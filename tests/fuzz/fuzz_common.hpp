// Shared pieces of the groupfit fuzz harnesses (tests/fuzz/README.md).
//
// - fixed_models(): small deterministic summaries (text levels with two
//   covariates; integer levels without covariates; a weighted model with an
//   aliased covariate) that fuzz_options and fuzz_weights fit;
// - fix_blob(): patches the header length and the checksum of a model
//   BLOB so that mutated bytes get past the integrity checks and reach the
//   parser and the fit behind them;
// - run_reports(): every report of a fit; groupfit::error is the only
//   exception allowed out of the core, anything else is a finding;
// - finding(): reports a broken invariant and aborts, which libFuzzer records
//   as a crash with the input that caused it.
#pragma once

#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <string_view>
#include <vector>

#include "compare.hpp"
#include "error.hpp"
#include "fit.hpp"
#include "options.hpp"
#include "report.hpp"
#include "summary.hpp"

namespace gf_fuzz {

[[noreturn]] inline void finding(const std::string& what) {
    std::fprintf(stderr, "\ngroupfit fuzz finding: %s\n", what.c_str());
    std::fflush(stderr);
    std::abort();
}

// ------------------------------------------------------------ model BLOBs

inline void put_u64(std::string& s, std::size_t at, std::uint64_t v) {
    for (int k = 0; k < 8; ++k) s[at + k] = static_cast<char>((v >> (8 * k)) & 0xff);
}

/// Header (magic 4, version 2, flags 2, length 8, p 4, cells 4, dropped 5x8)
/// plus the trailing checksum: the smallest BLOB the parser looks into.
inline constexpr std::size_t min_blob = 4 + 2 + 2 + 8 + 4 + 4 + 8 * 5 + 8;

/// The same bytes with the length field and the checksum made consistent
/// (unchanged when the BLOB is shorter than a header).
inline std::string fix_blob(std::string b) {
    if (b.size() < min_blob) return b;
    put_u64(b, 8, b.size());
    // The checksum of the version the (possibly mutated) header names.
    const auto version = static_cast<std::uint16_t>(static_cast<unsigned char>(b[4]) |
                                                    static_cast<unsigned char>(b[5]) << 8);
    put_u64(b, b.size() - 8,
            groupfit::detail::blob_checksum(version, reinterpret_cast<const unsigned char*>(b.data()),
                                            b.size() - 8));
    return b;
}

// ------------------------------------------------------------ fixed models

/// A deterministic pseudo-random stream (no global state, same on every run).
struct lcg {
    std::uint64_t s;
    double next() {  // in [0, 1)
        s = s * 6364136223846793005ull + 1442695040888963407ull;
        return double(s >> 11) * 0x1p-53;
    }
};

struct fixed_model {
    const char* what;
    groupfit::summary s;
};

/// Three small models that together reach every coding, test and comparison:
///  0: text levels a, b, c, d (unbalanced), covariates x1, x2, unweighted;
///  1: integer levels 1, 2, 4, 8, no covariates, unweighted (spacing=values,
///     Welch's test, product-form Dunnett);
///  2: text levels a, b, c, weighted, covariate x1 constant within each level
///     (aliased) and x2 free.
inline const std::vector<fixed_model>& fixed_models() {
    static const std::vector<fixed_model> models = [] {
        std::vector<fixed_model> out;
        groupfit::limits lim;
        {
            groupfit::summary s(2, false);
            lcg r{1};
            const char* names[] = {"a", "b", "c", "d"};
            const int rows[] = {5, 4, 6, 3};
            for (int g = 0; g < 4; ++g)
                for (int i = 0; i < rows[g]; ++i) {
                    const double x1 = 10.0 + 5.0 * r.next() + g;
                    const double x2 = 2.0 * r.next() - 1.0;
                    const double y = 3.0 + 0.7 * g + 0.4 * x1 - 1.5 * x2 + r.next();
                    const double v[] = {x1, x2, y};
                    s.add_row(s.cell_for(groupfit::level::from_text(names[g]), lim), v, 1.0);
                }
            s.drop(groupfit::drop_reason::null_response);
            out.push_back({"text levels, 2 covariates", std::move(s)});
        }
        {
            groupfit::summary s(0, false);
            lcg r{2};
            const int levels[] = {1, 2, 4, 8};
            const int rows[] = {4, 5, 3, 6};
            for (int g = 0; g < 4; ++g)
                for (int i = 0; i < rows[g]; ++i) {
                    const double y = 20.0 + levels[g] + (1.0 + g) * r.next();
                    s.add_row(s.cell_for(groupfit::level::from_integer(levels[g]), lim), &y, 1.0);
                }
            out.push_back({"integer levels, no covariates", std::move(s)});
        }
        {
            groupfit::summary s(2, true);
            lcg r{3};
            const char* names[] = {"a", "b", "c"};
            for (int g = 0; g < 3; ++g)
                for (int i = 0; i < 4; ++i) {
                    const double x1 = 1.0 + g;  // constant within the level: aliased
                    const double x2 = r.next();
                    const double y = 1.0 + g + 2.0 * x2 + 0.5 * r.next();
                    const double v[] = {x1, x2, y};
                    s.add_row(s.cell_for(groupfit::level::from_text(names[g]), lim), v,
                              0.5 + r.next());
                }
            s.drop(groupfit::drop_reason::zero_weight);
            out.push_back({"weighted, aliased covariate", std::move(s)});
        }
        return out;
    }();
    return models;
}

// ------------------------------------------------------------ reports

/// Every table must have the report's columns and rows of that width.
inline void check_table(const groupfit::table& t, const std::vector<std::string>& columns,
                        const char* report) {
    if (t.columns != columns) finding(std::string(report) + ": wrong column list");
    for (const auto& row : t.rows)
        if (row.size() != columns.size())
            finding(std::string(report) + ": a row has " + std::to_string(row.size()) +
                    " values for " + std::to_string(columns.size()) + " columns");
}

/// Runs `body`; groupfit::error (a message for the SQL user) is an expected
/// outcome, any other exception escapes and ends the run as a finding.
template <class F>
bool attempt(F&& body) {
    try {
        body();
        return true;
    } catch (const groupfit::error&) {
        return false;
    }
}

/// Every report of the fit (and the summary report of s).
inline void run_reports(const groupfit::fit& f, const groupfit::summary& s) {
    using namespace groupfit;
    attempt([&] { check_table(coef_report(f), coef_columns(), "coef_report"); });
    attempt([&] { check_table(levels_report(f), levels_columns(), "levels_report"); });
    attempt([&] { check_table(deviations_report(f), deviations_columns(), "deviations_report"); });
    attempt([&] { check_table(tests_report(f), tests_columns(), "tests_report"); });
    attempt([&] { check_table(summary_report(f, s), summary_columns(), "summary_report"); });
    attempt([&] { check_table(pairs_report(f), pairs_columns(), "pairs_report"); });
}

}  // namespace gf_fuzz
