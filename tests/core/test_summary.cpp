// Unit tests of the summary state: merging, the BLOB format, bad BLOBs.
#include <gtest/gtest.h>

#include <cmath>
#include <fstream>
#include <random>

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
    for (const char* name : {"model_v1.hex", "model_v2.hex"}) {
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
