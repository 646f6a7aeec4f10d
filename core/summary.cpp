#include "summary.hpp"

#include <algorithm>
#include <bit>
#include <cmath>
#include <cstring>
#include <limits>
#include <stdexcept>

#include "error.hpp"

namespace groupfit {

const char* drop_reason_name(drop_reason r) {
    switch (r) {
    case drop_reason::null_response: return "null_response";
    case drop_reason::null_group: return "null_group";
    case drop_reason::null_covariate: return "null_covariate";
    case drop_reason::null_weight: return "null_weight";
    case drop_reason::zero_weight: return "zero_weight";
    }
    return "unknown";
}

namespace detail {

template <class T>
T include_row(int k, T* d, T* rbar, T* row, T w, int first) {
    // AS 75 (Gentleman 1974), generalised so that the last column is a column
    // like the others: its d accumulates the residual sum of squares. The
    // update of Rbar is written r' = r + sbar * (x_j - x_i r), which equals
    // AS 75's cbar r + sbar x_j (cbar = 1 - sbar x_i) with one product fewer.
    for (int i = first; i < k; ++i) {
        if (w == T(0.0)) return T(0.0);
        const T xi = row[i];
        if (xi == T(0.0)) continue;
        const T wxi = w * xi;
        const T dpi = d[i] + wxi * xi;
        if (i == k - 1) {
            d[i] = dpi;
            return wxi * xi;
        }
        const T inv = T(1.0) / dpi;
        const T sbar = wxi * inv;
        w = w * (d[i] * inv);
        d[i] = dpi;
        T* r = rbar + rbar_index(k, i, i + 1);
        for (int j = i + 1; j < k; ++j, ++r) {
            const T xj = row[j] - xi * *r;
            row[j] = xj;
            *r = *r + sbar * xj;
        }
    }
    return T(0.0);
}

template double include_row<double>(int, double*, double*, double*, double, int);
template ddouble include_row<ddouble>(int, ddouble*, ddouble*, ddouble*, ddouble, int);

void factor_of_gram(int k, const ddouble* g, ddouble* d, ddouble* rbar, ddouble* a) {
    // a: the working copy that the elimination overwrites, normalised by
    // two_sum (no value changes): add_row leaves its sums unnormalised
    // between two renormalisations (sum2_add).
    const int n = k * (k + 1) / 2;
    for (int e = 0; e < n; ++e) a[e] = dd::two_sum(g[e].hi, g[e].lo);
    for (int i = 0; i < k; ++i) {
        const ddouble piv = a[gram_index(k, i, i)];
        const ddouble own = dd::two_sum(g[gram_index(k, i, i)].hi, g[gram_index(k, i, i)].lo);
        ddouble* r = i + 1 < k ? rbar + rbar_index(k, i, i + 1) : nullptr;
        if (!(piv.hi > 0x1p-96 * own.hi)) {  // also when own is 0 or piv is negative
            d[i] = ddouble(0.0);
            for (int j = i + 1; j < k; ++j) r[j - i - 1] = ddouble(0.0);
            continue;
        }
        d[i] = piv;
        const ddouble inv = ddouble(1.0) / piv;
        for (int j = i + 1; j < k; ++j) r[j - i - 1] = a[gram_index(k, i, j)] * inv;
        // The trailing matrix loses this column: a(j, l) -= rbar(i, j) a(i, l).
        for (int j = i + 1; j < k; ++j) {
            const ddouble rij = r[j - i - 1];
            for (int l = j; l < k; ++l) a[gram_index(k, j, l)] -= rij * a[gram_index(k, i, l)];
        }
    }
}

void gram_of_factor(int k, const ddouble* d, const ddouble* rbar, ddouble* g) {
    // g(i, j) = sum over l <= i of d_l rbar(l, i) rbar(l, j), rbar(l, l) = 1:
    // row l of the factor contributes d_l rbar(l, i) (computed once) times
    // rbar(l, j) to every entry of the trailing triangle.
    const int n = k * (k + 1) / 2;
    for (int e = 0; e < n; ++e) g[e] = ddouble(0.0);
    for (int l = 0; l < k; ++l) {
        if (d[l].hi == 0.0) continue;
        const ddouble* r = rbar + rbar_index(k, l, l + 1) - (l + 1);  // r[j] = rbar(l, j), j > l
        for (int i = l; i < k; ++i) {
            const ddouble t = i == l ? d[l] : d[l] * r[i];
            ddouble* gi = g + gram_index(k, i, i) - i;  // gi[j] = g(i, j)
            gi[i] += i == l ? t : t * r[i];
            for (int j = i + 1; j < k; ++j) gi[j] += t * r[j];
        }
    }
}

}  // namespace detail

summary::summary(int covariates, bool weighted)
    : p_(covariates),
      weighted_(weighted),
      scratch_(2 * (static_cast<std::size_t>(covariates) + 2)),
      row_scratch_(4 * (static_cast<std::size_t>(covariates) + 2)) {}

std::int64_t summary::rows_used() const { return total_; }

std::int64_t summary::dropped_total() const {
    std::int64_t n = 0;
    for (auto v : dropped_) n += v;
    return n;
}

void summary::drop(drop_reason r) {
    if (dropped_total() >= max_rows)
        throw error("the model would count more than 2^53 dropped rows");
    ++dropped_[static_cast<int>(r)];
}

void summary::merge_dropped(const std::array<std::int64_t, drop_reason_count>& other) {
    std::int64_t add = 0;
    for (auto v : other) add += v;  // each count and their sum are at most max_rows
    if (add > max_rows - dropped_total())
        throw error("the merged model would count more than 2^53 dropped rows");
    for (int r = 0; r < drop_reason_count; ++r) dropped_[r] += other[r];
}

namespace {
/// Bit 63 is set iff x is infinite or NaN (all exponent bits set): a branch-free
/// test whose results OR together.
inline std::uint64_t nonfinite_bit(double x) {
    return (std::bit_cast<std::uint64_t>(x) & 0x7ff0000000000000ull) + 0x0010000000000000ull;
}

// The throws of the per-row checks, out of the hot path.
[[noreturn, gnu::cold, gnu::noinline]] void throw_overflow() {
    throw error("values too large for a model: a sum of squares overflowed (rescale the "
                "response, weights or covariates)");
}
[[noreturn, gnu::cold, gnu::noinline]] void throw_too_many_rows() {
    throw error("the model would have more than 2^53 rows");
}

/// Throws when a value of n double-doubles (either part) or x is not finite:
/// the values were too large for the sums of squares.
void check_finite(const ddouble* f, std::size_t n, double x) {
    // Two entries per step, four independent lanes (the compiler vectorises it).
    std::uint64_t a = nonfinite_bit(x), b = 0, e = 0, g = 0;
    std::size_t i = 0;
    for (; i + 1 < n; i += 2) {
        a |= nonfinite_bit(f[i].hi);
        b |= nonfinite_bit(f[i].lo);
        e |= nonfinite_bit(f[i + 1].hi);
        g |= nonfinite_bit(f[i + 1].lo);
    }
    if (i < n) a |= nonfinite_bit(f[i].hi) | nonfinite_bit(f[i].lo);
    if ((a | b | e | g) >> 63) [[unlikely]] throw_overflow();
}

}  // namespace

double summary::cell_mean(std::size_t c, int j) const {
    return (ddouble(cell_origin(c)[j]) + cell_rbar(c)[detail::rbar_index(p_ + 2, 0, j + 1)]).value();
}

ddouble summary::cell_mean_from(std::size_t c, int j, double origin) const {
    return dd::two_diff(cell_origin(c)[j], origin) + cell_rbar(c)[detail::rbar_index(p_ + 2, 0, j + 1)];
}

namespace {

/// The bytes that identify a level of a given kind: the int64 or the double
/// (reals are never integral, never zero, never NaN: compared bit for bit),
/// or the text or blob bytes.
struct level_bytes {
    const void* data;
    std::size_t len;
};
level_bytes bytes_of(const level& lv) {
    switch (lv.kind) {
    case level_kind::integer: return {&lv.i, sizeof lv.i};
    case level_kind::real: return {&lv.r, sizeof lv.r};
    default: return {lv.bytes.data(), lv.bytes.size()};
    }
}

/// Up to 8 bytes as one word (n <= 8), without a call to memcpy: levels are
/// mostly short texts and 8-byte numbers.
inline std::uint64_t load_small(const unsigned char* p, std::size_t n) {
    if (n >= 4) {  // two overlapping 4-byte loads
        std::uint32_t a, b;
        std::memcpy(&a, p, 4);
        std::memcpy(&b, p + n - 4, 4);
        return (static_cast<std::uint64_t>(a) << 32) | b;
    }
    if (n == 0) return 0;
    return (static_cast<std::uint64_t>(p[0]) << 16) | (static_cast<std::uint64_t>(p[n >> 1]) << 8) | p[n - 1];
}

/// A fast 64-bit hash of a level's kind and bytes (multiply-xorshift over
/// 8-byte words); only for the in-memory table, never stored.
std::uint64_t level_hash(level_kind kind, const void* data, std::size_t n) {
    constexpr std::uint64_t m = 0x9fb21c651e98df25ull;
    const auto* p = static_cast<const unsigned char*>(data);
    std::uint64_t h = (0x9e3779b97f4a7c15ull ^ n) * m ^ static_cast<std::uint64_t>(kind);
    for (; n > 8; p += 8, n -= 8) {
        std::uint64_t v;
        std::memcpy(&v, p, 8);
        h = (h ^ v) * m;
        h ^= h >> 32;
    }
    h = (h ^ load_small(p, n)) * m;
    h ^= h >> 29;
    h *= 0xbf58476d1ce4e5b9ull;
    return h ^ (h >> 32);
}

bool same_level(const level& lv, level_kind kind, const void* data, std::size_t len) {
    if (lv.kind != kind) return false;
    const level_bytes b = bytes_of(lv);
    if (b.len != len) return false;
    if (len <= 8)
        return load_small(static_cast<const unsigned char*>(b.data), len) ==
               load_small(static_cast<const unsigned char*>(data), len);
    return std::memcmp(b.data, data, len) == 0;
}

}  // namespace


namespace {
/// What a slot holds for a level: its bytes when they fit a word, else its hash.
struct slot_key {
    std::uint64_t word;
    std::uint32_t tag;
};
inline slot_key key_of(level_kind kind, const void* data, std::size_t len, std::uint64_t h) {
    if (len <= 8)
        return {load_small(static_cast<const unsigned char*>(data), len),
                static_cast<std::uint32_t>(kind) | static_cast<std::uint32_t>(len) << 8};
    return {h, static_cast<std::uint32_t>(kind) | 255u << 8};
}
}  // namespace

std::size_t summary::find_cell(level_kind kind, const void* data, std::size_t len,
                               std::uint64_t hash) const {
    if (slots_.empty()) return npos;
    const std::size_t mask = slots_.size() - 1;
    const slot_key key = key_of(kind, data, len, hash);
    for (std::size_t i = hash & mask;; i = (i + 1) & mask) {
        const slot& s = slots_[i];
        if (s.cell1 == 0) return npos;
        if (s.word == key.word && s.tag == key.tag) {
            const std::size_t c = s.cell1 - 1;
            if (len <= 8 || same_level(levels_[c], kind, data, len)) return c;
        }
    }
}

void summary::place(std::vector<slot>& table, std::size_t c, std::uint64_t h) const {
    const level_bytes b = bytes_of(levels_[c]);
    const slot_key key = key_of(levels_[c].kind, b.data, b.len, h);
    const std::size_t mask = table.size() - 1;
    std::size_t i = h & mask;
    while (table[i].cell1 != 0) i = (i + 1) & mask;
    table[i] = slot{key.word, static_cast<std::uint32_t>(c + 1), key.tag};
}

void summary::rehash(std::size_t size) {
    std::vector<slot> t(size);
    for (std::size_t c = 0; c < levels_.size(); ++c) {
        const level_bytes b = bytes_of(levels_[c]);
        place(t, c, level_hash(levels_[c].kind, b.data, b.len));
    }
    slots_ = std::move(t);
}

std::size_t summary::add_cell(const level& lv, std::uint64_t hash, const limits& lim) {
    if (levels_.size() >= lim.max_levels)
        throw error("too many levels in the grouping argument: the limit is " +
                    std::to_string(lim.max_levels) +
                    " (raise it with groupfit_limit('levels', N))");
    // All or nothing: if an allocation fails, the cell is taken out of every
    // member again, so that a summary that threw is still consistent.
    const std::size_t c = levels_.size();
    // The level cap (at most 1e7, see groupfit_limit) keeps c + 1 within a
    // slot's low 32 bits.
    try {
        if (2 * (c + 1) > slots_.size()) rehash(std::max<std::size_t>(16, 2 * slots_.size()));
        levels_.push_back(lv);
        n_.push_back(0);
        log_w_.push_back(0.0);
        origin_.resize(c * (p_ + 1) + (p_ + 1), 0.0);
        // A summary that holds matrices makes the factor of a new cell when
        // next read (stale_); one read from a BLOB holds factors only, and
        // the decoder fills them in.
        if (gram_ok_)
            gram_.resize(c * stride() + stride(), ddouble());
        else
            factor_.resize(c * stride() + stride(), ddouble());
    } catch (...) {
        if (levels_.size() > c) levels_.pop_back();
        if (n_.size() > c) n_.pop_back();
        if (log_w_.size() > c) log_w_.pop_back();
        origin_.resize(c * (p_ + 1));
        if (gram_ok_)
            gram_.resize(c * stride());
        else
            factor_.resize(c * stride());
        throw;
    }
    if (gram_ok_) stale_ = true;
    place(slots_, c, hash);
    return c;
}

std::size_t summary::cell_for(const level& lv, const limits& lim) {
    switch (lv.kind) {
    case level_kind::integer: return cell_for(lv.kind, &lv.i, sizeof lv.i, lim);
    case level_kind::real: return cell_for(lv.kind, &lv.r, sizeof lv.r, lim);
    default: return cell_for(lv.kind, lv.bytes.data(), lv.bytes.size(), lim);
    }
}

namespace {
/// A real level as its cell is keyed: a whole number is the integer level
/// (level::from_real; `whole` holds it and kind/data are redirected to it).
/// The BLOB format stores finite numbers only (its decoder rejects the rest):
/// an infinite level would make a model that no report can read.
void canonical_real(level_kind& kind, const void*& data, std::int64_t& whole) {
    const double v = *static_cast<const double*>(data);
    if (!std::isfinite(v)) [[unlikely]]
        throw error(std::string("a real level must be finite, got ") +
                    (std::isnan(v) ? "NaN" : v > 0 ? "Inf" : "-Inf"));
    const level lv = level::from_real(v);
    if (lv.kind == level_kind::integer) {
        kind = level_kind::integer;
        whole = lv.i;
        data = &whole;
    }
}
}  // namespace

std::size_t summary::cell_for(level_kind kind, const void* data, std::size_t len,
                              const limits& lim) {
    std::int64_t whole;
    if (kind == level_kind::real) canonical_real(kind, data, whole);
    // The level of the previous row, compared without touching levels_ when
    // short (rows often come sorted or clustered by level).
    if (len <= 8) {
        const slot_key key = key_of(kind, data, len, 0);
        if (key.word == last_word_ && key.tag == last_tag_) return last_cell_;
    } else if (last_tag_ != 0 && same_level(levels_[last_cell_], kind, data, len)) {
        return last_cell_;
    }
    return cell_for_hashed(kind, data, len, level_hash(kind, data, len), lim);
}

std::size_t summary::cell_for_hashed(level_kind kind, const void* data, std::size_t len,
                                     std::uint64_t h, const limits& lim) {
    std::size_t c = find_cell(kind, data, len, h);
    if (c == npos) {
        const auto* bytes = static_cast<const char*>(data);
        level lv;
        switch (kind) {
        case level_kind::integer: lv = level::from_integer(*static_cast<const std::int64_t*>(data)); break;
        case level_kind::real: lv = level::from_real(*static_cast<const double*>(data)); break;
        case level_kind::text: lv = level::from_text(std::string_view(bytes, len)); break;
        case level_kind::blob: lv = level::from_blob(std::string_view(bytes, len)); break;
        }
        c = add_cell(lv, h, lim);
    }
    const slot_key key = key_of(kind, data, len, h);
    last_word_ = key.word;
    last_tag_ = key.tag;
    return last_cell_ = c;
}

namespace {

/// Rows a cell takes between two normalisations of its sums (see sum2_add).
constexpr std::int64_t renormalise_every = 64;

/// acc += ph + pl with acc an unnormalised pair: the rounding error of the
/// high-part sum (two-sum, exact) and pl go to acc.lo, which is folded back
/// into acc.hi every renormalise_every rows of the cell. This is the cascaded
/// summation Sum2 of Ogita, Rump and Oishi (2005), whose result is as accurate
/// as if it were summed in twice the working precision; folding every B rows
/// keeps the low part's own rounding at about B 2^-106 of the sum's terms.
inline void sum2_add(ddouble& acc, double ph, double pl) {
    const double s = acc.hi + ph;
    const double bb = s - acc.hi;
    const double err = (acc.hi - (s - bb)) + (ph - bb);
    acc.hi = s;
    acc.lo += err + pl;
}

/// Makes every pair of g[0..n) normalised (|lo| <= ulp(hi)/2); no value changes.
inline void normalise(ddouble* g, std::size_t n) {
    for (std::size_t e = 0; e < n; ++e) g[e] = dd::two_sum(g[e].hi, g[e].lo);
}

/// Folds one row into a cell's matrix g (origin o): with z = (1, x - o), the
/// shifts exact as double-doubles (two-difference), and u = w z, g += u z'
/// over the upper triangle. Each product is formed as two-product of the high
/// parts plus the two cross terms (the low-times-low term is below 2^-106 of
/// it) and summed unnormalised by sum2_add. Unweighted, g(0,0) is a count
/// (exact below 2^53) and g(0,j) sums the shifts. K = p + 2 fixed at compile
/// time unrolls it (its scratch on the stack, left uninitialised); K = 0
/// takes k at run time and its scratch (4k doubles) from `work`.
template <int K, bool Weighted>
inline void add_to_gram(int k_run, ddouble* g, const double* o, const double* values, double w,
                        double* work) {
    const int k = K ? K : k_run;
    double local[K ? 4 * K : 1];
    double* zh = K ? local : work;
    double* zl = zh + k;
    double* uh = Weighted ? zl + k : zh;
    double* ul = Weighted ? uh + k : zl;
    zh[0] = 1.0;
    zl[0] = 0.0;
    for (int j = 1; j < k; ++j) {
        const ddouble d = dd::two_diff(values[j - 1], o[j - 1]);
        zh[j] = d.hi;
        zl[j] = d.lo;
    }
    int e = 0;
    if constexpr (Weighted) {
        for (int j = 0; j < k; ++j) {
            const ddouble u = ddouble(zh[j], zl[j]) * w;
            uh[j] = u.hi;
            ul[j] = u.lo;
        }
    } else {
        g[0].hi += 1.0;
        for (int j = 1; j < k; ++j) sum2_add(g[j], zh[j], zl[j]);
        e = k;
    }
    for (int i = Weighted ? 0 : 1; i < k; ++i)
        for (int j = i; j < k; ++j, ++e) {
            ddouble pr = dd::two_prod(uh[i], zh[j]);
            pr.lo += uh[i] * zl[j] + ul[i] * zh[j];
            sum2_add(g[e], pr.hi, pr.lo);
        }
}

template <bool Weighted>
void add_to_gram_any(int k, ddouble* g, const double* o, const double* values, double w,
                     double* work) {
    switch (k) {
    case 2: return add_to_gram<2, Weighted>(k, g, o, values, w, work);
    case 3: return add_to_gram<3, Weighted>(k, g, o, values, w, work);
    case 4: return add_to_gram<4, Weighted>(k, g, o, values, w, work);
    case 5: return add_to_gram<5, Weighted>(k, g, o, values, w, work);
    case 6: return add_to_gram<6, Weighted>(k, g, o, values, w, work);
    default: return add_to_gram<0, Weighted>(k, g, o, values, w, work);
    }
}

}  // namespace

void row_batch::push(level_kind kind, const void* data, std::size_t len, const double* values,
                     double w) {
    if (full()) throw std::logic_error("row_batch::push on a full batch");
    std::int64_t whole;
    if (kind == level_kind::real) canonical_real(kind, data, whole);
    const int r = n_;
    kind_[r] = kind;
    len_[r] = len;
    if (len <= 8) {
        word_[r] = 0;
        if (len > 0) std::memcpy(&word_[r], data, len);
    } else {
        word_[r] = long_.size();
        long_.append(static_cast<const char*>(data), len);
    }
    std::copy_n(values, p_ + 1, &values_[static_cast<std::size_t>(r) * (p_ + 1)]);
    w_[r] = w;
    ++n_;
}

void summary::add_batch(row_batch& b, const limits& lim, new_cell_hook on_new_cell,
                        void* context) {
    struct clear_on_exit {
        row_batch& b;
        ~clear_on_exit() { b.clear(); }
    } clear{b};
    if (b.p_ != p_) throw std::logic_error("summary::add_batch with a batch of another shape");
    const int n = b.n_;
    std::array<const void*, row_batch::capacity> data;
    std::array<std::uint64_t, row_batch::capacity> hash;
    std::array<std::size_t, row_batch::capacity> cell;
    // 1. Hash every level and ask for its first slot.
    for (int r = 0; r < n; ++r) {
        data[r] = b.len_[r] <= 8 ? static_cast<const void*>(&b.word_[r]) : b.long_.data() + b.word_[r];
        hash[r] = level_hash(b.kind_[r], data[r], b.len_[r]);
        if (!slots_.empty()) __builtin_prefetch(&slots_[hash[r] & (slots_.size() - 1)]);
    }
    // 2. Find (or make) every cell, in row order, and ask for its state.
    for (int r = 0; r < n; ++r) {
        const std::size_t before = cells();
        cell[r] = cell_for_hashed(b.kind_[r], data[r], b.len_[r], hash[r], lim);
        if (cells() != before && on_new_cell) on_new_cell(context, *this, cell[r]);
        if (gram_ok_) {
            const ddouble* g = gram(cell[r]);
            for (std::size_t e = 0; e < stride(); e += 4) __builtin_prefetch(g + e, 1);
            __builtin_prefetch(g + stride() - 1, 1);
        }
        __builtin_prefetch(origin(cell[r]), 1);
        __builtin_prefetch(&n_[cell[r]], 1);
    }
    // 3. Add the rows.
    for (int r = 0; r < n; ++r)
        add_row(cell[r], &b.values_[static_cast<std::size_t>(r) * (p_ + 1)], b.w_[r]);
}

void summary::add_row(std::size_t c, const double* values, double w) {
    if (total_ >= max_rows) [[unlikely]] throw_too_many_rows();
    if (!gram_ok_) [[unlikely]] ensure_gram();
    const int k = p_ + 2;
    double* o = origin(c);
    ddouble* g = gram(c);
    if (n_[c] == 0)  // the cell's first row
        for (int j = 0; j <= p_; ++j) o[j] = values[j];
    if (weighted_) add_to_gram_any<true>(k, g, o, values, w, row_scratch_.data());
    else add_to_gram_any<false>(k, g, o, values, w, row_scratch_.data());
    if (++n_[c] % renormalise_every == 0) normalise(g, stride());
    ++total_;
    if (weighted_) log_w_[c] += std::log(w);
    stale_ = true;
    // Finite values whose squares overflow (around 1e154 and beyond) make the
    // sums infinite or NaN: an error at this row, never a model that its own
    // reports would reject. The diagonal bounds the rest of the matrix
    // (|u_i z_j| <= max(u_i z_i, u_j z_j)), and a low part is finite while
    // its high part is, so the diagonal's high parts are the ones checked per
    // row; settle checks every factor entry as well.
    std::uint64_t bad = weighted_ ? nonfinite_bit(log_w_[c]) : 0;
    for (int i = 0; i < k; ++i) bad |= nonfinite_bit(g[detail::gram_index(k, i, i)].hi);
    if (bad >> 63) [[unlikely]] throw_overflow();
}

void summary::ensure_gram() {
    if (gram_ok_) return;
    const int k = p_ + 2;
    std::vector<ddouble> g(cells() * stride());
    for (std::size_t c = 0; c < cells(); ++c) {
        const ddouble* f = &factor_[c * stride()];
        detail::gram_of_factor(k, f, f + k, &g[c * stride()]);
    }
    gram_ = std::move(g);
    gram_ok_ = true;
}

void summary::settle() const {
    if (!stale_) return;
    // Only a summary that holds matrices is ever stale.
    const int k = p_ + 2;
    if (factor_.size() < cells() * stride()) factor_.resize(cells() * stride());
    std::vector<ddouble> work(stride());
    for (std::size_t c = 0; c < cells(); ++c) {
        ddouble* f = &factor_[c * stride()];
        detail::factor_of_gram(k, &gram_[c * stride()], f, f + k, work.data());
        check_finite(f, stride(), log_w_[c]);  // stale_ stays set if it throws
    }
    stale_ = false;
}

void summary::merge_gram(std::size_t into, const double* fo, const ddouble* fg,
                         std::int64_t rows, double log_w) {
    if (rows > max_rows - total_) throw error("the merged model would have more than 2^53 rows");
    const int k = p_ + 2;
    double* o = origin(into);
    ddouble* g = gram(into);
    normalise(g, stride());  // the dd operations below take normalised pairs
    if (n_[into] == 0) {
        std::copy(fo, fo + p_ + 1, o);
        std::copy(fg, fg + stride(), g);
    } else {
        // Move fg to our origin: z' = z + delta with delta_0 = 0 (the constant
        // column), so g'(i,j) = g(i,j) + delta_i g(0,j) + delta_j g(0,i)
        // + delta_i delta_j g(0,0).
        ddouble* delta = scratch_.data();
        delta[0] = ddouble(0.0);
        for (int j = 1; j < k; ++j) delta[j] = dd::two_diff(fo[j - 1], o[j - 1]);
        // With s'_j = g(0,j) + delta_j g(0,0) (the moved first row):
        // g'(i,j) = g(i,j) + delta_i s'_j + delta_j g(0,i).
        ddouble* moved = delta + k;
        for (int j = 0; j < k; ++j) moved[j] = fg[j] + delta[j] * fg[0];
        for (int j = 0; j < k; ++j) g[j] += moved[j];
        for (int i = 1, e = k; i < k; ++i)
            for (int j = i; j < k; ++j, ++e) g[e] += fg[e] + delta[i] * moved[j] + delta[j] * fg[i];
    }
    n_[into] += rows;
    total_ += rows;
    log_w_[into] += log_w;
    stale_ = true;
    check_finite(g, stride(), log_w_[into]);  // two finite models can merge into an infinite one
}

void summary::merge(const summary& other, const limits& lim) {
    if (other.p_ != p_)
        throw error("models differ in shape: " + std::to_string(p_) + " covariates vs " +
                    std::to_string(other.p_));
    if (other.weighted_ != weighted_)
        throw error("models differ in kind: one is weighted (groupfit_weighted) and one is not");
    if (&other == this) {
        const summary copy = other;
        merge(copy, lim);
        return;
    }
    ensure_gram();
    const int k = p_ + 2;
    std::vector<ddouble> tmp(stride());  // the other cell's matrix, normalised
    for (std::size_t c = 0; c < other.cells(); ++c) {
        const level& lv = other.levels_[c];
        const level_bytes b = bytes_of(lv);
        const std::uint64_t h = level_hash(lv.kind, b.data, b.len);
        std::size_t into = find_cell(lv.kind, b.data, b.len, h);
        if (into == npos) into = add_cell(lv, h, lim);
        if (other.gram_ok_) {
            std::copy_n(&other.gram_[c * stride()], stride(), tmp.data());
            normalise(tmp.data(), stride());
        } else {
            detail::gram_of_factor(k, other.cell_d(c), other.cell_rbar(c), tmp.data());
        }
        merge_gram(into, other.cell_origin(c), tmp.data(), other.n_[c], other.log_w_[c]);
    }
    merge_dropped(other.dropped_);
}

// ---------------------------------------------------------------------------
// BLOB format, version 3 (all integers and doubles little-endian):
//   magic "GFm\x01" (4 bytes) | u16 version | u16 flags (bit 0: weighted)
//   | u64 total length in bytes, checksum included | u32 p | u32 cells
//   | u64 dropped[5] | cells... | u64 checksum of all preceding bytes
// cell: u8 kind | u32 key length | key bytes (int64 or double for numbers)
//   | u64 rows | f64 log weight sum | f64 origin[p+1] | dd d[p+2]
//   | dd rbar[(p+2)(p+1)/2]        (dd = two f64, high part then low part)
// The checksum (word_checksum below) reads the bytes as little-endian 64-bit
// words in four independent lanes, about 6 bytes per cycle.
// Version 2 was the same with a 64-bit FNV-1a checksum (one byte per step,
// about 4 cycles a byte: 60% of groupfit_merge's time over 1,000 models);
// version 1 also stored one f64 per d and rbar entry. Both are still read.
// ---------------------------------------------------------------------------
namespace {

constexpr char magic[4] = {'G', 'F', 'm', '\x01'};

/// Little-endian 64-bit word at p.
inline std::uint64_t load_le64(const unsigned char* p) {
    std::uint64_t v;
    std::memcpy(&v, p, 8);
    if constexpr (std::endian::native == std::endian::big) v = __builtin_bswap64(v);
    return v;
}

/// The version-3 checksum of n bytes. Four lanes each fold every fourth word
/// (the last block zero-padded) by a <- rotl((a ^ w) * m, 27); the lanes are
/// then finished and folded into one value together with n. Every step is a
/// bijection of the lane (xor with the word, multiplication by an odd
/// constant, rotation), and the fold is a bijection of each lane given the
/// others, so any change confined to one 8-byte word, in particular any one
/// changed byte, always changes the checksum.
std::uint64_t word_checksum(const unsigned char* p, std::size_t n) {
    constexpr std::uint64_t m = 0x9fb21c651e98df25ull;
    std::uint64_t a[4] = {0x243f6a8885a308d3ull, 0x13198a2e03707344ull, 0xa4093822299f31d0ull,
                          0x082efa98ec4e6c89ull};
    auto block = [&](const unsigned char* b) {
        for (int i = 0; i < 4; ++i) a[i] = std::rotl((a[i] ^ load_le64(b + 8 * i)) * m, 27);
    };
    std::size_t at = 0;
    for (; n - at >= 32; at += 32) block(p + at);
    if (at < n) {
        unsigned char last[32] = {};
        std::memcpy(last, p + at, n - at);
        block(last);
    }
    std::uint64_t h = static_cast<std::uint64_t>(n) * m;
    for (std::uint64_t x : a) {
        x ^= x >> 33;
        x *= 0xff51afd7ed558ccdull;
        x ^= x >> 33;
        h = std::rotl((h ^ x) * m, 31);
    }
    return h;
}

std::uint64_t fnv1a(const unsigned char* p, std::size_t n) {
    std::uint64_t h = 1469598103934665603ull;
    for (std::size_t i = 0; i < n; ++i) {
        h ^= p[i];
        h *= 1099511628211ull;
    }
    return h;
}

struct reader {
    const unsigned char* p;
    std::size_t n, at = 0;
    void need(std::size_t k) const {
        if (n - at < k) throw error("not a groupfit model: the BLOB is truncated");
    }
    template <class T>
    T get() {
        need(sizeof(T));
        unsigned char b[sizeof(T)];
        std::memcpy(b, p + at, sizeof(T));
        if constexpr (std::endian::native == std::endian::big)
            for (std::size_t i = 0; i < sizeof(T) / 2; ++i) std::swap(b[i], b[sizeof(T) - 1 - i]);
        T v;
        std::memcpy(&v, b, sizeof(T));
        at += sizeof(T);
        return v;
    }
    double finite() {
        double v = get<double>();
        if (!std::isfinite(v)) throw error("not a groupfit model: a stored number is not finite");
        return v;
    }
};

}  // namespace

std::uint64_t detail::blob_checksum(std::uint16_t version, const unsigned char* p, std::size_t n) {
    return version >= 3 ? word_checksum(p, n) : fnv1a(p, n);
}

std::size_t summary::serialized_size() const {
    std::size_t n = 4 + 2 + 2 + 8 + 4 + 4 + 8 * drop_reason_count + 8;
    for (const level& lv : levels_)
        n += 1 + 4 + (lv.kind == level_kind::integer || lv.kind == level_kind::real ? 8 : lv.bytes.size());
    return n + cells() * (8 + 8 + 8 * (p_ + 1) + 16 * stride());
}

void summary::serialize_to(unsigned char* out) const {
    // A stale summary (one that changed since last read) writes factors made
    // here, one cell at a time, without keeping them: this is what the
    // aggregate does last, and memory then holds the matrices and the BLOB only.
    const int k = p_ + 2;
    std::vector<ddouble> fresh(stale_ ? 2 * stride() : 0);
    unsigned char* at = out;
    auto put = [&](auto v) {
        unsigned char b[sizeof v];
        std::memcpy(b, &v, sizeof v);
        if constexpr (std::endian::native == std::endian::big)
            for (std::size_t i = 0; i < sizeof v / 2; ++i) std::swap(b[i], b[sizeof v - 1 - i]);
        std::memcpy(at, b, sizeof v);
        at += sizeof v;
    };
    std::memcpy(at, magic, 4);
    at += 4;
    put(static_cast<std::uint16_t>(format_version));
    put(static_cast<std::uint16_t>(weighted_ ? 1 : 0));
    put(static_cast<std::uint64_t>(serialized_size()));
    put(static_cast<std::uint32_t>(p_));
    put(static_cast<std::uint32_t>(cells()));
    for (auto v : dropped_) put(static_cast<std::uint64_t>(v));
    for (std::size_t c = 0; c < cells(); ++c) {
        const level& lv = levels_[c];
        put(static_cast<std::uint8_t>(lv.kind));
        if (lv.kind == level_kind::integer) {
            put(std::uint32_t{8});
            put(static_cast<std::int64_t>(lv.i));
        } else if (lv.kind == level_kind::real) {
            put(std::uint32_t{8});
            put(lv.r);
        } else {
            put(static_cast<std::uint32_t>(lv.bytes.size()));
            if (!lv.bytes.empty()) std::memcpy(at, lv.bytes.data(), lv.bytes.size());
            at += lv.bytes.size();
        }
        put(static_cast<std::uint64_t>(n_[c]));
        put(log_w_[c]);
        for (int j = 0; j <= p_; ++j) put(cell_origin(c)[j]);
        const ddouble* v;
        if (stale_) {
            detail::factor_of_gram(k, &gram_[c * stride()], fresh.data(), fresh.data() + k,
                                   fresh.data() + stride());
            check_finite(fresh.data(), stride(), log_w_[c]);
            v = fresh.data();
        } else {
            v = &factor_[c * stride()];
        }
        for (std::size_t j = 0; j < stride(); ++j) {
            put(v[j].hi);
            put(v[j].lo);
        }
    }
    put(word_checksum(out, static_cast<std::size_t>(at - out)));
}

std::string summary::serialize() const {
    std::string out(serialized_size(), '\0');
    serialize_to(reinterpret_cast<unsigned char*>(out.data()));
    return out;
}

template <class OnHeader, class OnCell>
void summary::parse_blob(std::string_view blob, const limits& lim, OnHeader&& on_header,
                         OnCell&& on_cell) {
    reader r{reinterpret_cast<const unsigned char*>(blob.data()), blob.size()};
    if (blob.size() < 4 || std::memcmp(blob.data(), magic, 4) != 0)
        throw error("not a groupfit model: the BLOB does not start with the groupfit header");
    constexpr std::size_t min_size = 4 + 2 + 2 + 8 + 4 + 4 + 8 * drop_reason_count + 8;
    r.at = 4;
    const auto version = r.get<std::uint16_t>();
    if (version > format_version)
        throw error("the model was written by a newer groupfit (format version " +
                    std::to_string(version) + "); this build reads versions up to " +
                    std::to_string(format_version));
    if (version == 0) throw error("not a groupfit model: format version 0 does not exist");
    if (blob.size() < min_size) throw error("not a groupfit model: the BLOB is truncated");
    const auto flags = r.get<std::uint16_t>();
    if (flags > 1) throw error("not a groupfit model: unknown flags in the header");
    const auto length = r.get<std::uint64_t>();
    if (length != blob.size())
        throw error("not a groupfit model: the BLOB is " + std::to_string(blob.size()) +
                    " bytes but its header says " + std::to_string(length) +
                    " (truncated or padded)");
    const std::uint64_t stored =
        [&] {
            reader t{r.p, r.n, r.n - 8};
            return t.get<std::uint64_t>();
        }();
    if (detail::blob_checksum(version, r.p, r.n - 8) != stored)
        throw error("not a groupfit model: the checksum does not match (the BLOB was altered)");
    r.n -= 8;  // the checksum is not data
    const auto p = r.get<std::uint32_t>();
    if (p > static_cast<std::uint32_t>(lim.max_covariates))
        throw error("the model has " + std::to_string(p) + " covariates, more than the limit of " +
                    std::to_string(lim.max_covariates));
    const auto ncell = r.get<std::uint32_t>();
    if (ncell > lim.max_levels)
        throw error("the model has " + std::to_string(ncell) + " levels, more than the limit of " +
                    std::to_string(lim.max_levels));
    // At most max_rows rows used and max_rows dropped, so that every count and
    // sum of counts stays exact (and far from int64 overflow) whatever is merged.
    constexpr std::uint64_t max_count = static_cast<std::uint64_t>(max_rows);
    std::array<std::int64_t, drop_reason_count> dropped{};
    std::uint64_t total_dropped = 0;
    for (auto& v : dropped) {
        const auto u = r.get<std::uint64_t>();
        total_dropped += u;  // no wrap: both terms are at most 2^64 - 1 and 2^53
        if (u > max_count || total_dropped > max_count)
            throw error("not a groupfit model: a row count is out of range");
        v = static_cast<std::int64_t>(u);
    }
    on_header(static_cast<int>(p), (flags & 1) != 0, dropped);
    const int k = static_cast<int>(p) + 2;
    const std::size_t stride = k + k * (k - 1) / 2;
    std::uint64_t total_rows = 0;
    std::vector<double> origin(p + 1);
    std::vector<ddouble> fac(stride);
    for (std::uint32_t c = 0; c < ncell; ++c) {
        const auto kind = r.get<std::uint8_t>();
        const auto klen = r.get<std::uint32_t>();
        std::int64_t ival = 0;
        double rval = 0;
        std::string_view bytes;
        if (kind == 1 || kind == 2) {
            if (klen != 8) throw error("not a groupfit model: a numeric level has a bad size");
            if (kind == 1) {
                ival = r.get<std::int64_t>();
            } else {
                rval = r.finite();
                if (level::from_real(rval).kind != level_kind::real)
                    throw error("not a groupfit model: a real level holds an integer");
            }
        } else if (kind == 3 || kind == 4) {
            r.need(klen);
            bytes = std::string_view(reinterpret_cast<const char*>(r.p + r.at), klen);
            r.at += klen;
        } else {
            throw error("not a groupfit model: unknown level type " + std::to_string(kind));
        }
        const auto rows = r.get<std::uint64_t>();
        total_rows += rows;  // wraps only when rows itself is out of range
        if (rows == 0 || rows > max_count || total_rows > max_count)
            throw error("not a groupfit model: a cell has an impossible row count");
        const double log_w = r.finite();
        for (auto& v : origin) v = r.finite();
        for (std::size_t j = 0; j < stride; ++j) {
            const double hi = r.finite(), lo = version >= 2 ? r.finite() : 0.0;
            if (std::fabs(lo) > std::fabs(hi) * 0x1p-52)
                throw error("not a groupfit model: a stored double-double is not normalised");
            fac[j] = ddouble(hi, lo);
        }
        for (int j = 0; j < k; ++j)
            if (fac[j].hi < 0) throw error("not a groupfit model: a cell factor has a negative weight");
        if (!(fac[0].hi > 0)) throw error("not a groupfit model: a cell has no weight");
        const level_kind lk = static_cast<level_kind>(kind);
        const void* data = kind == 1 ? static_cast<const void*>(&ival)
                           : kind == 2 ? static_cast<const void*>(&rval)
                                       : static_cast<const void*>(bytes.data());
        on_cell(lk, data, kind <= 2 ? std::size_t(8) : bytes.size(), static_cast<std::int64_t>(rows),
                log_w, origin.data(), fac.data());
    }
    if (r.at != r.n) throw error("not a groupfit model: unexpected bytes after the last cell");
}

summary summary::deserialize(std::string_view blob, const limits& lim) {
    summary s;
    parse_blob(
        blob, lim,
        [&](int p, bool weighted, const std::array<std::int64_t, drop_reason_count>& dropped) {
            s = summary(p, weighted);
            s.gram_ok_ = false;  // factors only, until something is added (ensure_gram)
            s.dropped_ = dropped;
        },
        [&](level_kind kind, const void* data, std::size_t len, std::int64_t rows, double log_w,
            const double* origin, const ddouble* fac) {
            const std::size_t before = s.cells();
            const std::size_t cell = s.cell_for(kind, data, len, lim);
            if (s.cells() == before) throw error("not a groupfit model: a level appears twice");
            s.n_[cell] = rows;
            s.total_ += rows;
            s.log_w_[cell] = log_w;
            std::copy(origin, origin + s.p_ + 1, s.origin(cell));
            std::copy(fac, fac + s.stride(), &s.factor_[cell * s.stride()]);
        });
    return s;
}

void summary::merge_blob(std::string_view blob, const limits& lim) {
    // Cells of this BLOB already merged, to reject a level that appears twice.
    std::vector<std::uint8_t> seen;
    std::vector<ddouble> tmp;  // a cell's matrix, formed from its stored factor
    parse_blob(
        blob, lim,
        [&](int p, bool weighted, const std::array<std::int64_t, drop_reason_count>& dropped) {
            if (p != p_)
                throw error("models differ in shape: " + std::to_string(p_) + " covariates vs " +
                            std::to_string(p));
            if (weighted != weighted_)
                throw error("models differ in kind: one is weighted (groupfit_weighted) and one is not");
            ensure_gram();
            tmp.resize(stride());
            merge_dropped(dropped);
            seen.assign(cells(), 0);
        },
        [&](level_kind kind, const void* data, std::size_t len, std::int64_t rows, double log_w,
            const double* origin, const ddouble* fac) {
            const std::size_t cell = cell_for(kind, data, len, lim);
            if (cell >= seen.size()) seen.resize(cell + 1, 0);
            if (seen[cell]) throw error("not a groupfit model: a level appears twice");
            seen[cell] = 1;
            detail::gram_of_factor(p_ + 2, fac, fac + p_ + 2, tmp.data());
            merge_gram(cell, origin, tmp.data(), rows, log_w);
        });
}

}  // namespace groupfit
