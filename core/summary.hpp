// groupfit core: the mergeable per-cell summary behind every model.
//
// For each cell (level of the grouping) the summary keeps a square-root-free
// orthogonal factor of the cell's rows over the columns [1, x1..xp, y], after
// shifting every column by the cell's origin (the first value seen in that
// cell). The factor is the one of Gentleman's weighted Givens algorithm
// (Gentleman 1974, Applied Statistics algorithm AS 75): a diagonal D and a unit
// upper-triangular Rbar with R = D^(1/2) Rbar, so that R'R equals the weighted
// cross-product matrix of the shifted rows without ever forming it. The first
// row of Rbar holds the cell's running means; D[0] is the cell's weight sum;
// the last entry of D is the cell's residual sum of squares of y on the
// covariates within the cell.
//
// Two summaries merge exactly (up to rounding): the rows of one factor are fed,
// with their weights D[i], into the other. Memory is O(cells x (p+2)^2),
// whatever the number of rows.
//
// D and Rbar are held in double-double (ddouble.hpp), and each shifted value
// x - origin enters as an exact double-double difference, so the factor carries
// about 106 bits: the rounding it adds is far below what the double input
// itself carries, even for problems as ill-conditioned as NIST's Wampler5.
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <unordered_map>
#include <vector>

#include "ddouble.hpp"
#include "level.hpp"

namespace groupfit {

/// Why a row was left out of a model.
enum class drop_reason : int {
    null_response = 0,
    null_group,
    null_covariate,
    null_weight,
    zero_weight,
};
inline constexpr int drop_reason_count = 5;
const char* drop_reason_name(drop_reason r);

/// Limits that protect the host process. Per connection, never global.
struct limits {
    std::size_t max_levels = 50000;
    int max_covariates = 32;
};

/// The most rows a model holds, counted separately for the rows used (over all
/// cells) and the rows dropped (over all reasons). Every count and every sum of
/// counts then stays exact in a double and far from int64 overflow, whatever is
/// merged or decoded; adding, merging or decoding beyond it throws.
inline constexpr std::int64_t max_rows = std::int64_t(1) << 53;

/// BLOB format written by this build. Version 1 (a double factor) is still
/// read: its values become double-doubles with a zero low part.
inline constexpr std::uint16_t format_version = 2;

namespace detail {
/// Include one weighted row (length k) into a square-root-free factor (d, rbar
/// packed by rows) starting at column `first`. The row is overwritten. Returns
/// the weighted squared residual the row adds to the last column, which is the
/// increase of the residual sum of squares of the last column on the others.
/// T is double or ddouble.
template <class T>
T include_row(int k, T* d, T* rbar, T* row, T w, int first = 0);
/// Index of rbar(i, j), j > i, in the packed upper triangle of a k-column factor.
inline int rbar_index(int k, int i, int j) { return i * (2 * k - i - 1) / 2 + (j - i - 1); }
}  // namespace detail

class summary {
public:
    summary() = default;
    summary(int covariates, bool weighted);

    int covariates() const { return p_; }
    int width() const { return p_ + 2; }  // columns of the factor: 1, x1..xp, y
    bool weighted() const { return weighted_; }
    std::size_t cells() const { return levels_.size(); }
    std::int64_t rows_used() const;
    std::int64_t dropped(drop_reason r) const { return dropped_[static_cast<int>(r)]; }
    std::int64_t dropped_total() const;

    /// The cell of a level, created on first sight. Throws groupfit::error when
    /// the cap on levels would be exceeded or a real level is not finite.
    std::size_t cell_for(const level& lv, const limits& lim);
    /// The same from raw bytes, without building a level unless the cell is new:
    /// for integers `data` points to an int64, for reals to a double (normalised
    /// like level::from_real), for text and blobs to the bytes. The hot path of
    /// the aggregate: the last level seen is compared before any hashing.
    std::size_t cell_for(level_kind kind, const void* data, std::size_t len, const limits& lim);

    /// Adds one row to a cell: values holds x1..xp then y (raw, finite); w > 0.
    /// Throws groupfit::error when the cell's factor overflows (values around
    /// 1e154 and beyond, whose squares are not finite doubles) or the model
    /// would pass max_rows; the cell is then unspecified (the aggregate fails).
    void add_row(std::size_t cell, const double* values, double w);
    /// Counts a row left out; throws past max_rows dropped rows.
    void drop(drop_reason r);

    /// Adds the other summary's cells and counts. Throws when shapes differ, the
    /// level cap would be exceeded, a count would pass max_rows or a merged
    /// factor overflows; after a throw this summary is unspecified.
    void merge(const summary& other, const limits& lim);

    /// Merges a model BLOB straight into this summary, without building a
    /// second summary (what groupfit_merge does per row). Throws like
    /// deserialize and merge; after a throw this summary is unspecified.
    void merge_blob(std::string_view blob, const limits& lim);

    std::string serialize() const;
    /// Parses a model BLOB; throws groupfit::error naming what is wrong.
    static summary deserialize(std::string_view blob, const limits& lim);

    // Read access to one cell.
    const level& cell_level(std::size_t c) const { return levels_[c]; }
    std::int64_t cell_rows(std::size_t c) const { return n_[c]; }
    double cell_log_weight(std::size_t c) const { return log_w_[c]; }
    const double* cell_origin(std::size_t c) const { return &origin_[c * (p_ + 1)]; }  // p+1
    const ddouble* cell_d(std::size_t c) const { return &factor_[c * stride()]; }    // p+2
    const ddouble* cell_rbar(std::size_t c) const { return cell_d(c) + (p_ + 2); }
    /// Mean of column j (0..p-1 covariates, p = response) in cell c.
    double cell_mean(std::size_t c, int j) const;
    /// The same relative to `origin`: (cell origin - origin) + shifted mean.
    ddouble cell_mean_from(std::size_t c, int j, double origin) const;

private:
    std::size_t stride() const {  // ddouble entries of one cell's factor
        const std::size_t k = p_ + 2;
        return k + k * (k - 1) / 2;
    }
    double* origin(std::size_t c) { return &origin_[c * (p_ + 1)]; }
    ddouble* d(std::size_t c) { return &factor_[c * stride()]; }
    ddouble* rbar(std::size_t c) { return d(c) + (p_ + 2); }
    std::size_t add_cell(const level& lv, std::string key, const limits& lim);
    void merge_factor(std::size_t into, const double* origin, const ddouble* factor,
                      std::int64_t rows, double log_w);
    void merge_dropped(const std::array<std::int64_t, drop_reason_count>& other);
    /// Throws when an entry of the cell's factor (or its log weight sum) is not
    /// finite: the values were too large for the sums of squares.
    void check_finite(std::size_t cell) const;
    template <class OnHeader, class OnCell>
    static void parse_blob(std::string_view blob, const limits& lim, OnHeader&& on_header,
                           OnCell&& on_cell);

    int p_ = 0;
    bool weighted_ = false;
    std::vector<level> levels_;
    std::vector<std::int64_t> n_;
    std::int64_t total_ = 0;  // rows over all cells, at most max_rows
    std::vector<double> log_w_;
    std::vector<double> origin_;   // per cell: origin[p+1]
    std::vector<ddouble> factor_;  // per cell: d[p+2], rbar[(p+2)(p+1)/2]
    struct key_hash {
        using is_transparent = void;
        std::size_t operator()(std::string_view k) const { return std::hash<std::string_view>{}(k); }
    };
    std::unordered_map<std::string, std::size_t, key_hash, std::equal_to<>> index_;
    std::string last_key_;
    std::size_t last_cell_ = 0;
    std::array<std::int64_t, drop_reason_count> dropped_{};
    std::vector<ddouble> scratch_;
};

}  // namespace groupfit
