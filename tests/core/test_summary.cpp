// Unit tests of the summary state: merging, the BLOB format, bad BLOBs.
#include <gtest/gtest.h>

#include <random>

#include "error.hpp"
#include "fit.hpp"
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
