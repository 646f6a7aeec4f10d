// groupfit core: the mergeable per-cell summary behind every model.
//
// For each cell (level of the grouping) the summary keeps the weighted
// cross-product (Gram) matrix of the cell's rows over the columns
// [1, x1..xp, y], after shifting every column by the cell's origin (the first
// value seen in that cell), in double-double (ddouble.hpp). Each shifted value
// x - origin enters as an exact double-double difference and each product and
// sum carries about 106 bits, so a row costs O((p+2)^2) multiply-adds without
// a division. Two summaries merge by adding their matrices after moving one to
// the other's origin.
//
// Readers (the fit, the BLOB) see the cell as a square-root-free factor: a
// diagonal D and a unit upper-triangular Rbar with Rbar' D Rbar equal to the
// cell's matrix (the LDL' factorisation of it, in double-double). The first
// row of Rbar holds the cell's means (as shifts from the origin); D[0] is the
// cell's weight sum; the last entry of D is the cell's residual sum of squares
// of y on the covariates within the cell. A factor is computed when first read
// after the cell changed, and kept. A model read from a BLOB holds factors
// only; its matrices are formed (Rbar' D Rbar) only if rows or models are
// added to it. Memory is O(cells x (p+2)^2), whatever the number of rows.
//
// Accuracy: forming cross products squares the condition number k of a
// cell's shifted, column-scaled columns. In 106-bit arithmetic the error that
// adds, about k^2 2^-104, stays below the error the double input itself
// carries, about k 2^-53, for every k below 2^51; NIST's Filip (k about 3.7e9
// with the shift) keeps every digit it had with a Givens factor of the rows
// (tests/core/test_nist.cpp measures them).
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
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

/// BLOB format written by this build. Versions 1 (a double factor) and 2 (an
/// FNV-1a checksum) are still read; version 1's values become double-doubles
/// with a zero low part.
inline constexpr std::uint16_t format_version = 3;

namespace detail {
/// Include one weighted row (length k) into a square-root-free factor (d, rbar
/// packed by rows) starting at column `first`. The row is overwritten. Returns
/// the weighted squared residual the row adds to the last column, which is the
/// increase of the residual sum of squares of the last column on the others.
/// T is double or ddouble.
template <class T>
T include_row(int k, T* d, T* rbar, T* row, T w, int first = 0);
/// The checksum a model BLOB of format `version` carries over its first n
/// bytes (everything before the checksum): FNV-1a for versions 1 and 2, the
/// word-wise checksum of core/summary.cpp from version 3. For tests and
/// tools that forge or repair BLOBs.
std::uint64_t blob_checksum(std::uint16_t version, const unsigned char* p, std::size_t n);
/// Index of rbar(i, j), j > i, in the packed upper triangle of a k-column factor.
inline int rbar_index(int k, int i, int j) { return i * (2 * k - i - 1) / 2 + (j - i - 1); }
/// Index of g(i, j), j >= i, in the packed upper triangle (diagonal included)
/// of a k-column cross-product matrix.
inline int gram_index(int k, int i, int j) { return i * (2 * k - i + 1) / 2 + (j - i); }
/// The square-root-free factor (d[k], rbar packed) of a k x k cross-product
/// matrix g (packed by gram_index): LDL' in double-double. A pivot at or below
/// 2^-96 of its column's own diagonal (rounding noise of the 106-bit sums, or
/// exactly collinear columns) becomes an exact zero with a zero rbar row.
/// `work` holds at least k(k+1)/2 entries.
void factor_of_gram(int k, const ddouble* g, ddouble* d, ddouble* rbar, ddouble* work);
/// The cross-product matrix rbar' diag(d) rbar of a factor, packed by gram_index.
void gram_of_factor(int k, const ddouble* d, const ddouble* rbar, ddouble* g);
}  // namespace detail

class summary;

/// Rows held back to be added together by summary::add_batch, which first
/// hashes every row's level and asks the memory for its slot, then looks the
/// levels up and asks for each cell's state, and only then adds the rows: with
/// many levels (state beyond the CPU caches) the memory waits of the rows
/// overlap instead of following one another. The batch owns copies of its
/// levels and values.
class row_batch {
public:
    static constexpr int capacity = 16;
    explicit row_batch(int covariates)
        : p_(covariates), values_(static_cast<std::size_t>(capacity) * (covariates + 1)) {}
    bool empty() const { return n_ == 0; }
    bool full() const { return n_ == capacity; }
    /// Copies a row: its level as raw bytes (as summary::cell_for takes them),
    /// values x1..xp then y, and its weight. Throws groupfit::error for a real
    /// level that is not finite (as cell_for does); std::logic_error when full.
    void push(level_kind kind, const void* data, std::size_t len, const double* values, double w);
    void clear() {
        n_ = 0;
        long_.clear();
    }

private:
    friend class summary;
    int p_;
    int n_ = 0;
    std::array<level_kind, capacity> kind_{};
    std::array<std::size_t, capacity> len_{};
    std::array<std::uint64_t, capacity> word_{};  // the bytes when len <= 8, else the offset in long_
    std::array<double, capacity> w_{};
    std::string long_;  // levels of more than 8 bytes, one after another
    std::vector<double> values_;  // capacity rows of p + 1
};

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

    /// Whether rows should go through add_batch: when the cells' matrices
    /// outgrow what the CPU caches near the core hold (256 KiB; the levels'
    /// state, (p+2)(p+3)/2 double-doubles per cell), so that rows mostly wait
    /// for memory. Below that, a row at a time is faster.
    bool wants_batches() const { return cells() * stride() * sizeof(ddouble) > (256u << 10); }
    using new_cell_hook = void (*)(void* context, const summary& s, std::size_t cell);
    /// Adds the rows of a batch in their order, with the same result, bit for
    /// bit, as cell_for and add_row row by row; `on_new_cell` (when given) is
    /// called with each cell the batch creates, before any of its rows is
    /// added, and may throw. Throws like cell_for and add_row; after a throw
    /// the summary is unspecified. The batch is emptied either way.
    void add_batch(row_batch& batch, const limits& lim, new_cell_hook on_new_cell = nullptr,
                   void* context = nullptr);

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
    /// The BLOB's size, and the BLOB written into `out` (serialized_size()
    /// bytes), for callers that own the buffer. Throws like settle.
    std::size_t serialized_size() const;
    void serialize_to(unsigned char* out) const;
    /// Parses a model BLOB; throws groupfit::error naming what is wrong.
    static summary deserialize(std::string_view blob, const limits& lim);

    // Read access to one cell. The factor accessors compute the cell's factor
    // if it changed since last read (see settle), so they may throw like it.
    const level& cell_level(std::size_t c) const { return levels_[c]; }
    std::int64_t cell_rows(std::size_t c) const { return n_[c]; }
    double cell_log_weight(std::size_t c) const { return log_w_[c]; }
    const double* cell_origin(std::size_t c) const { return &origin_[c * (p_ + 1)]; }  // p+1
    const ddouble* cell_d(std::size_t c) const {  // p+2
        if (stale_) settle();
        return &factor_[c * stride()];
    }
    const ddouble* cell_rbar(std::size_t c) const { return cell_d(c) + (p_ + 2); }
    /// Mean of column j (0..p-1 covariates, p = response) in cell c.
    double cell_mean(std::size_t c, int j) const;
    /// The same relative to `origin`: (cell origin - origin) + shifted mean.
    ddouble cell_mean_from(std::size_t c, int j, double origin) const;

    /// Computes every cell's factor when the model changed since last read.
    /// Throws groupfit::error when a factor is not finite (values too large),
    /// std::bad_alloc when memory runs out (then nothing changed).
    void settle() const;

private:
    // The cells by level: open addressing with linear probing, at most half
    // full. A level of at most 8 bytes (every number, short texts) is held in
    // its slot whole, so that finding it reads the table only; a longer one
    // keeps its hash there and is compared with levels_ when the hashes agree.
    struct slot {
        std::uint64_t word = 0;  // the level's bytes (len <= 8) or its hash
        std::uint32_t cell1 = 0; // cell + 1; 0 = empty
        std::uint32_t tag = 0;   // kind in bits 0-7, length (or 255 when > 8) in bits 8-15
    };
    std::size_t stride() const {  // ddouble entries of one cell's matrix, or of its factor
        const std::size_t k = p_ + 2;
        return k * (k + 1) / 2;
    }
    double* origin(std::size_t c) { return &origin_[c * (p_ + 1)]; }
    ddouble* gram(std::size_t c) { return &gram_[c * stride()]; }
    std::size_t add_cell(const level& lv, std::uint64_t hash, const limits& lim);
    /// cell_for after its shortcut: the cell of a level (real levels already
    /// canonical) whose hash is h, made when new; remembered as the last one.
    std::size_t cell_for_hashed(level_kind kind, const void* data, std::size_t len,
                                std::uint64_t h, const limits& lim);
    /// The cell of a level given as raw bytes (see cell_for) and its hash, or
    /// npos when the summary has no such cell.
    std::size_t find_cell(level_kind kind, const void* data, std::size_t len,
                          std::uint64_t hash) const;
    /// Puts cell c (level kind/data/len, hash h) into a free slot.
    void place(std::vector<slot>& table, std::size_t c, std::uint64_t h) const;
    /// Rebuilds the slot table with `size` slots (a power of two).
    void rehash(std::size_t size);
    static constexpr std::size_t npos = static_cast<std::size_t>(-1);
    /// Forms every cell's matrix from its factor (a model read from a BLOB
    /// before the first change); no-op when the matrices are current.
    void ensure_gram();
    /// Adds a cell matrix g (origin o, rows, log weight sum; normalised
    /// pairs) into cell `into`.
    void merge_gram(std::size_t into, const double* o, const ddouble* g, std::int64_t rows,
                    double log_w);
    void merge_dropped(const std::array<std::int64_t, drop_reason_count>& other);
    template <class OnHeader, class OnCell>
    static void parse_blob(std::string_view blob, const limits& lim, OnHeader&& on_header,
                           OnCell&& on_cell);

    int p_ = 0;
    bool weighted_ = false;
    std::vector<level> levels_;
    std::vector<std::int64_t> n_;
    std::int64_t total_ = 0;  // rows over all cells, at most max_rows
    std::vector<double> log_w_;
    std::vector<double> origin_;  // per cell: origin[p+1]
    // Per cell: the packed upper triangle of the matrix, row by row
    // (gram_index). Current for every cell when gram_ok_; empty otherwise.
    // add_row leaves the pairs unnormalised (|lo| up to about 64 ulp(hi))
    // between renormalisations; every reader normalises its copy first.
    std::vector<ddouble> gram_;
    bool gram_ok_ = true;
    // Per cell: d[p+2] then rbar[(p+2)(p+1)/2]; current unless stale_ (made
    // by settle from the matrices, hence mutable). One flag for the whole
    // summary: a row costs no per-cell bookkeeping, and reading a model that
    // changed costs one factorisation per cell (O(cells (p+2)^3), no rows).
    mutable std::vector<ddouble> factor_;
    mutable bool stale_ = false;
    std::vector<slot> slots_;
    std::size_t last_cell_ = 0;  // the cell found last (meaningful once a cell exists)
    std::uint64_t last_word_ = 0;  // its slot key (see slot)
    std::uint32_t last_tag_ = 0;   // 0 until a cell has been found
    std::array<std::int64_t, drop_reason_count> dropped_{};
    std::vector<ddouble> scratch_;  // 2(p+2): a merge's shift and moved first row
    std::vector<double> row_scratch_;  // 4(p+2): a row's z and w z, high and low parts (p > 4)
};

}  // namespace groupfit
