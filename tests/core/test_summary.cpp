// Unit tests of the summary state: merging, the BLOB format, bad BLOBs.
#include <gtest/gtest.h>

#include <array>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <fstream>
#include <functional>
#include <limits>
#include <random>
#include <string>
#include <utility>
#include <vector>

#include "error.hpp"
#include "fit.hpp"
#include "report.hpp"
#include "summary.hpp"

using namespace groupfit;

namespace {
summary random_summary(unsigned seed, int rows, int p, int levels) {
    std::mt19937_64 rng(seed);
    std::normal_distribution<double> nd;
    summary s(p, false);
    limits lim;
    std::vector<double> v(p + 1);
    for (int r = 0; r < rows; ++r) {
        const int g = static_cast<int>(rng() % levels);
        for (int j = 0; j < p; ++j) v[j] = 100 + 5 * nd(rng);
        v[p] = 3 * g + 0.5 * (p ? v[0] : 0) + nd(rng);
        s.add_row(s.cell_for(level::from_integer(g), lim), v.data(), 1.0);
    }
    return s;
}
}  // namespace

TEST(Summary, RoundTripIsExact) {
    summary s = random_summary(1, 500, 2, 5);
    s.drop(drop_reason::null_covariate);
    std::string blob = s.serialize();
    summary t = summary::deserialize(blob, limits{});
    EXPECT_EQ(t.serialize(), blob);
    EXPECT_EQ(t.dropped(drop_reason::null_covariate), 1);
    EXPECT_EQ(t.rows_used(), 500);
}

TEST(Summary, EveryCorruptedByteIsRejected) {
    summary s = random_summary(2, 50, 1, 3);
    const std::string blob = s.serialize();
    for (std::size_t i = 0; i < blob.size(); ++i) {
        std::string bad = blob;
        bad[i] = static_cast<char>(bad[i] ^ 0x5a);
        EXPECT_THROW(summary::deserialize(bad, limits{}), error) << "byte " << i;
    }
    for (std::size_t n = 0; n < blob.size(); ++n)
        EXPECT_THROW(summary::deserialize(blob.substr(0, n), limits{}), error) << "length " << n;
}

namespace {
std::string read_hex_file(const std::string& path) {
    std::ifstream in(path);
    std::string hex, out;
    in >> hex;
    for (std::size_t i = 0; i + 1 < hex.size(); i += 2)
        out += static_cast<char>(std::stoi(hex.substr(i, 2), nullptr, 16));
    return out;
}

// The rows of tests/golden_blobs/data.sql.
summary golden_rows() {
    struct r { const char* g; int gi; double y, x; };
    const r rows[] = {{"north", 0, 12.5, 1.0}, {"north", 0, 14.25, 2.0}, {"north", 0, 13.0, 2.5},
                      {"south", 0, 20.0, 1.5}, {"south", 0, 22.5, 3.0}, {"south", 0, 21.0, 2.0},
                      {"east", 0, 9.75, 0.5},  {"east", 0, 11.0, 1.0},  {"east", 0, 12.5, 2.5},
                      {"east", 0, 10.0, 1.25}, {nullptr, 7, 3.0, 1.0},  {nullptr, 7, 4.5, 2.0}};
    summary s(1, false);
    limits lim;
    for (const auto& x : rows) {
        const double v[2] = {x.x, x.y};
        s.add_row(s.cell_for(x.g ? level::from_text(x.g) : level::from_integer(x.gi), lim), v, 1.0);
    }
    return s;
}
}  // namespace

// Format stability: BLOBs written by earlier builds (tests/golden_blobs) still
// decode and give the fit of their rows. Reference: a fresh summary of the
// same rows (tolerance 1e-12 relative: version 1 stored a double factor).
TEST(Summary, GoldenBlobsOfEveryFormatVersionStillLoad) {
    const summary rows = golden_rows();
    const fit fresh(rows, parse_options("coding=effect"));
    const table want = coef_report(fresh);
    for (const char* name : {"model_v1.hex", "model_v2.hex", "model_v3.hex"}) {
        const std::string blob =
            read_hex_file(std::string(GROUPFIT_SOURCE_DIR) + "/tests/golden_blobs/" + name);
        ASSERT_FALSE(blob.empty()) << name;
        const summary s = summary::deserialize(blob, limits{});
        EXPECT_EQ(s.rows_used(), 12) << name;
        const table got = coef_report(fit(s, parse_options("coding=effect")));
        ASSERT_EQ(got.rows.size(), want.rows.size()) << name;
        for (std::size_t r = 0; r < got.rows.size(); ++r)
            for (int c : {3, 4}) {  // estimate, std_error
                const double a = std::get<double>(got.rows[r][c]), b = std::get<double>(want.rows[r][c]);
                EXPECT_NEAR(a, b, 1e-12 * std::fabs(b)) << name << " row " << r;
            }
    }
}

// ---------------------------------------------------------------------------
// Overflow of the factor and of the row counts (findings of the fuzzers,
// tests/fuzz/corpus/*/regress-*): every path that changes a summary checks
// what it writes, so a model BLOB never holds a number its own reader rejects
// and no count overflows int64.
// ---------------------------------------------------------------------------
namespace {
const char* const overflow_text =
    "values too large for a model: a sum of squares overflowed (rescale the response, weights or "
    "covariates)";

std::string error_of(const std::function<void()>& f) {
    try {
        f();
    } catch (const error& e) {
        return e.what();
    }
    return "<no error>";
}

// A model BLOB written field by field (the layout in core/summary.cpp;
// versions 2 and 3 differ only in the checksum): no covariates, text levels,
// each cell with weight sum 2, residual sum of squares 1 and mean 1.5
// (origin 1, shifted mean 0.5).
std::string forged_blob(const std::vector<std::pair<std::string, std::uint64_t>>& cells,
                        const std::array<std::uint64_t, 5>& dropped,
                        std::uint16_t version = groupfit::format_version) {
    std::string b;
    auto put = [&](auto v) {
        char raw[sizeof v];
        std::memcpy(raw, &v, sizeof v);  // little-endian host (x86-64, arm64)
        b.append(raw, sizeof v);
    };
    b += std::string("GFm\x01", 4);
    put(version), put(std::uint16_t(0)), put(std::uint64_t(0));
    put(std::uint32_t(0)), put(std::uint32_t(cells.size()));
    for (auto d : dropped) put(d);
    for (const auto& [label, rows] : cells) {
        put(std::uint8_t(3)), put(std::uint32_t(label.size()));
        b += label;
        put(rows), put(0.0), put(1.0);
        for (double v : {2.0, 0.0, 1.0, 0.0, 0.5, 0.0}) put(v);  // d0, d1, rbar01 as (hi, lo)
    }
    const std::uint64_t total = b.size() + 8;
    std::memcpy(&b[8], &total, 8);
    if (version == 2) {  // FNV-1a, written here independently of the decoder's
        std::uint64_t h = 1469598103934665603ull;
        for (unsigned char c : b) h = (h ^ c) * 1099511628211ull;
        put(h);
    } else {
        put(groupfit::detail::blob_checksum(version, reinterpret_cast<const unsigned char*>(b.data()),
                                            b.size()));
    }
    return b;
}
constexpr std::uint64_t two53 = std::uint64_t(1) << 53;
}  // namespace

TEST(Summary, ForgedBlobBuilderMatchesTheFormat) {
    // The builder above writes what serialize() writes: a one-cell model.
    const summary s = summary::deserialize(forged_blob({{"a", 3}}, {1, 0, 0, 0, 2}), limits{});
    EXPECT_EQ(s.rows_used(), 3);
    EXPECT_EQ(s.dropped_total(), 3);
    EXPECT_DOUBLE_EQ(s.cell_mean(0, 0), 1.5);
    EXPECT_EQ(s.serialize(), forged_blob({{"a", 3}}, {1, 0, 0, 0, 2}));
    // The same model in format 2 (FNV-1a checksum) reads back to the same BLOB.
    const summary v2 = summary::deserialize(forged_blob({{"a", 3}}, {1, 0, 0, 0, 2}, 2), limits{});
    EXPECT_EQ(v2.serialize(), s.serialize());
}

// Finite values whose squares overflow fail at the row, in add_row; values
// just below that still make a model that reads back.
TEST(Summary, ValuesWhoseSquaresOverflowFailAtTheRow) {
    limits lim;
    {
        summary s(0, false);
        const double y1 = 1e308, y2 = -1e308;
        s.add_row(s.cell_for(level::from_text("a"), lim), &y1, 1.0);
        EXPECT_EQ(error_of([&] { s.add_row(s.cell_for(level::from_text("a"), lim), &y2, 1.0); }),
                  overflow_text);
    }
    {
        summary s(1, false);  // a covariate: 1e200 - (-1e200) squared
        const double r1[] = {1e200, 1.0}, r2[] = {-1e200, 2.0};
        s.add_row(s.cell_for(level::from_text("a"), lim), r1, 1.0);
        EXPECT_EQ(error_of([&] { s.add_row(s.cell_for(level::from_text("a"), lim), r2, 1.0); }),
                  overflow_text);
    }
    {
        summary s(1, false);  // no huge square: y over a tiny covariate spread, 1e300 / 1e-10
        const double r1[] = {1e-10, 1e300}, r2[] = {-1e-10, -1e300};
        s.add_row(s.cell_for(level::from_text("a"), lim), r1, 1.0);
        EXPECT_EQ(error_of([&] { s.add_row(s.cell_for(level::from_text("a"), lim), r2, 1.0); }),
                  overflow_text);
    }
    {
        summary s(0, true);  // the weight sum itself overflows
        const double y1 = 1.0, y2 = 2.0;
        s.add_row(s.cell_for(level::from_text("a"), lim), &y1, 1e308);
        EXPECT_EQ(error_of([&] { s.add_row(s.cell_for(level::from_text("a"), lim), &y2, 1e308); }),
                  overflow_text);
    }
    {
        summary s(0, false);  // 1e150: squares near 1e300 are still finite
        for (double y : {1e150, -1e150, 5e149}) s.add_row(s.cell_for(level::from_text("a"), lim), &y, 1.0);
        const summary t = summary::deserialize(s.serialize(), lim);
        EXPECT_EQ(t.rows_used(), 3);
        EXPECT_NEAR(t.cell_mean(0, 0), 5e149 / 3, 1e135);
    }
}

// The BLOB format stores finite numbers only, so a real level must be finite
// (found by fuzzing: groupfit(y, 1e999) made a model no report could read).
TEST(Summary, RealLevelsMustBeFinite) {
    limits lim;
    summary s(0, false);
    const double inf = std::numeric_limits<double>::infinity();
    EXPECT_EQ(error_of([&] { s.cell_for(level::from_real(inf), lim); }), "a real level must be finite, got Inf");
    EXPECT_EQ(error_of([&] { s.cell_for(level::from_real(-inf), lim); }), "a real level must be finite, got -Inf");
    EXPECT_EQ(error_of([&] { s.cell_for(level::from_real(std::nan("")), lim); }),
              "a real level must be finite, got NaN");
    EXPECT_EQ(s.cells(), 0u);
    const double y = 1.0;
    s.add_row(s.cell_for(level::from_real(1e308), lim), &y, 1.0);
    s.add_row(s.cell_for(level::from_real(2.5), lim), &y, 1.0);
    EXPECT_EQ(summary::deserialize(s.serialize(), lim).cells(), 2u);
}

// Two finite models can merge into an infinite one: merge and merge_blob
// (what groupfit_merge runs) refuse it instead of writing Inf.
TEST(Summary, MergeWhoseSumsOverflowFails) {
    limits lim;
    summary a(0, true);
    const double y = 1.0;
    a.add_row(a.cell_for(level::from_text("a"), lim), &y, 1e308);
    const std::string blob = a.serialize();
    summary by_merge = a;
    EXPECT_EQ(error_of([&] { by_merge.merge(a, lim); }), overflow_text);
    summary by_blob = a;
    EXPECT_EQ(error_of([&] { by_blob.merge_blob(blob, lim); }), overflow_text);
    // Another level is a separate cell: nothing overflows.
    summary b(0, true);
    b.add_row(b.cell_for(level::from_text("b"), lim), &y, 1e308);
    b.merge_blob(blob, lim);
    EXPECT_EQ(summary::deserialize(b.serialize(), lim).rows_used(), 2);
}

// At most 2^53 rows used and 2^53 rows dropped: decoding checks each count and
// their sums, merging checks the merged sums before it changes anything.
TEST(Summary, RowCountsStopAt2To53) {
    limits lim;
    const std::string out_of_range = "not a groupfit model: a row count is out of range";
    const std::string impossible = "not a groupfit model: a cell has an impossible row count";
    // Dropped counts: each, and their sum (which int64 would overflow at 2^62 + 2^62).
    EXPECT_EQ(summary::deserialize(forged_blob({}, {two53, 0, 0, 0, 0}), lim).dropped_total(),
              std::int64_t(two53));
    EXPECT_EQ(summary::deserialize(forged_blob({}, {two53 / 2, 0, two53 / 2, 0, 0}), lim).dropped_total(),
              std::int64_t(two53));
    EXPECT_EQ(error_of([&] { summary::deserialize(forged_blob({}, {two53 + 1, 0, 0, 0, 0}), lim); }),
              out_of_range);
    EXPECT_EQ(error_of([&] { summary::deserialize(forged_blob({}, {two53, 0, 0, 0, 1}), lim); }),
              out_of_range);
    EXPECT_EQ(error_of([&] {
                  summary::deserialize(forged_blob({}, {1ull << 62, 1ull << 62, 0, 0, 0}), lim);
              }),
              out_of_range);
    EXPECT_EQ(error_of([&] { summary::deserialize(forged_blob({}, {~0ull, 2, 0, 0, 0}), lim); }),
              out_of_range);
    // Rows used: each cell, and their sum.
    EXPECT_EQ(summary::deserialize(forged_blob({{"a", two53 / 2}, {"b", two53 / 2}}, {}), lim).rows_used(),
              std::int64_t(two53));
    EXPECT_EQ(error_of([&] { summary::deserialize(forged_blob({{"a", two53}, {"b", 1}}, {}), lim); }),
              impossible);
    EXPECT_EQ(error_of([&] {
                  summary::deserialize(forged_blob({{"a", 1ull << 62}, {"b", 1ull << 62}}, {}), lim);
              }),
              impossible);

    // Merging: up to 2^53 exactly, one more is an error (by merge and by merge_blob).
    const std::string half_rows = forged_blob({{"a", two53 / 2}}, {});
    const std::string half_plus = forged_blob({{"a", two53 / 2 + 1}}, {});
    const std::string half_dropped = forged_blob({{"a", 1}}, {0, two53 / 2, 0, 0, 0});
    const std::string half_dropped_plus = forged_blob({{"b", 1}}, {0, 0, 0, 0, two53 / 2 + 1});
    {
        summary s = summary::deserialize(half_rows, lim);
        s.merge_blob(half_rows, lim);
        EXPECT_EQ(s.rows_used(), std::int64_t(two53));
        EXPECT_EQ(s.cell_rows(0), std::int64_t(two53));
        EXPECT_EQ(summary::deserialize(s.serialize(), lim).rows_used(), std::int64_t(two53));
    }
    for (bool as_blob : {false, true}) {
        const std::string how = as_blob ? "merge_blob" : "merge";
        auto merged = [&](const std::string& into, const std::string& other) {
            summary s = summary::deserialize(into, lim);
            if (as_blob) s.merge_blob(other, lim);
            else s.merge(summary::deserialize(other, lim), lim);
            return s;
        };
        EXPECT_EQ(error_of([&] { merged(half_rows, half_plus); }),
                  "the merged model would have more than 2^53 rows")
            << how;
        const summary d = merged(half_dropped, half_dropped);
        EXPECT_EQ(d.dropped_total(), std::int64_t(two53)) << how;
        EXPECT_EQ(d.dropped(drop_reason::null_group), std::int64_t(two53)) << how;
        EXPECT_EQ(error_of([&] { merged(half_dropped, half_dropped_plus); }),
                  "the merged model would count more than 2^53 dropped rows")
            << how;
    }

    // The aggregate's own paths: a model at the cap takes no further row.
    {
        summary s = summary::deserialize(forged_blob({{"a", two53}}, {}), lim);
        const double y = 1.0;
        EXPECT_EQ(error_of([&] { s.add_row(s.cell_for(level::from_text("b"), lim), &y, 1.0); }),
                  "the model would have more than 2^53 rows");
        EXPECT_EQ(s.rows_used(), std::int64_t(two53));
    }
    {
        summary s = summary::deserialize(forged_blob({}, {0, 0, two53, 0, 0}), lim);
        EXPECT_EQ(error_of([&] { s.drop(drop_reason::null_response); }),
                  "the model would count more than 2^53 dropped rows");
        EXPECT_EQ(s.dropped_total(), std::int64_t(two53));
    }
}

// The batched path (summary::add_batch, used by the aggregate once a model's
// state outgrows the caches) must give the summary that row-at-a-time adding
// gives, bit for bit: the same rows, in the same order per cell, through the
// same arithmetic (an identity of our own design, checked byte for byte on
// the BLOBs). Levels of every kind: integers, whole reals (keyed as
// integers), fractional reals, short and long texts, blobs; new levels
// arriving inside a batch, a level repeated within one batch, weights.
TEST(Summary, BatchedRowsGiveTheSameModelBitForBit) {
    for (const bool weighted : {false, true}) {
        for (const int p : {0, 2, 5, 9}) {
            std::mt19937_64 rng(17 + p);
            std::normal_distribution<double> nd;
            limits lim;
            summary one(p, weighted), batched(p, weighted);
            row_batch batch(p);
            std::size_t hooked = 0;
            auto hook = [](void* n, const summary&, std::size_t) { ++*static_cast<std::size_t*>(n); };
            std::vector<double> v(p + 1);
            for (int r = 0; r < 5000; ++r) {
                const int g = static_cast<int>(rng() % 700);
                for (int j = 0; j < p; ++j) v[j] = 50 + 10 * nd(rng) + (r % 7) * 1e-3;
                v[p] = 0.1 * g + (p ? 2 * v[0] : 0) + nd(rng);
                const double w = weighted ? 0.5 + (rng() % 100) / 37.0 : 1.0;
                const std::int64_t i = g;
                const double x = g % 3 == 0 ? g : g + 0.25;  // whole reals are integer levels
                const std::string t = g % 2 ? "s" + std::to_string(g) : "a-longer-level-" + std::to_string(g);
                level_kind kind;
                const void* data;
                std::size_t len;
                switch (g % 4) {
                case 0: kind = level_kind::integer, data = &i, len = sizeof i; break;
                case 1: kind = level_kind::real, data = &x, len = sizeof x; break;
                case 2: kind = level_kind::text, data = t.data(), len = t.size(); break;
                default: kind = level_kind::blob, data = t.data(), len = t.size(); break;
                }
                one.add_row(one.cell_for(kind, data, len, lim), v.data(), w);
                batch.push(kind, data, len, v.data(), w);
                if (batch.full()) batched.add_batch(batch, lim, hook, &hooked);
                EXPECT_TRUE(!batch.full());
            }
            batched.add_batch(batch, lim, hook, &hooked);
            EXPECT_TRUE(batch.empty());
            EXPECT_EQ(hooked, batched.cells());
            EXPECT_EQ(batched.cells(), one.cells());
            EXPECT_EQ(batched.serialize(), one.serialize()) << "p=" << p << " weighted=" << weighted;
        }
    }
}

TEST(Summary, BatchedRowsKeepTheChecks) {
    limits lim;
    lim.max_levels = 3;
    summary s(0, false);
    row_batch b(0);
    const double y = 1.0;
    for (std::int64_t g = 0; g < 4; ++g) b.push(level_kind::integer, &g, sizeof g, &y, 1.0);
    EXPECT_EQ(error_of([&] { s.add_batch(b, lim); }),
              "too many levels in the grouping argument: the limit is 3 (raise it with "
              "groupfit_limit('levels', N))");
    EXPECT_TRUE(b.empty());  // emptied even when it throws
    const double inf = std::numeric_limits<double>::infinity();
    EXPECT_EQ(error_of([&] { b.push(level_kind::real, &inf, sizeof inf, &y, 1.0); }),
              "a real level must be finite, got Inf");
    const double big[] = {1e200}, small[] = {-1e200};
    summary t(0, false);
    std::int64_t g = 1;
    b.push(level_kind::integer, &g, sizeof g, big, 1.0);
    b.push(level_kind::integer, &g, sizeof g, small, 1.0);
    EXPECT_EQ(error_of([&] { t.add_batch(b, limits{}); }),
              "values too large for a model: a sum of squares overflowed (rescale the response, "
              "weights or covariates)");
    // Misuse of the API (not user input) is a logic error.
    while (!b.full()) b.push(level_kind::integer, &g, sizeof g, &y, 1.0);
    EXPECT_THROW(b.push(level_kind::integer, &g, sizeof g, &y, 1.0), std::logic_error);
    summary two(2, false);
    EXPECT_THROW(two.add_batch(b, limits{}), std::logic_error);
}
