// The input encoding of fuzz_sql (shared with make_corpus, which writes its
// seeds). An input is a sequence of at most max_calls calls; each call is one
// SQL statement from a fixed template whose arguments are bound parameters
// with fuzzed values. Bytes are read front to back; a read past the end gives
// zeros, so every byte string is a valid input.
//
// call      := u8 form, then the form's fields (below)
// form 0 agg_values   u8 fn, u8 nargs, u8 nrows, u8 mods, then nrows x nargs values
//                     SELECT fn(column1..) FROM (VALUES (?,..),..) [GROUP BY column1]
// form 1 agg_table    u8 fn, u8 nargs, nargs x (u8 c [value if c >= 0xC0]), u8 mods
//                     SELECT fn(<column of t or ?>..) FROM t [WHERE] [GROUP BY]
// form 2 tvf          u8 report, u8 nargs, u8 style, then nargs values
// form 3 limit        u8 nargs, then nargs values: SELECT groupfit_limit(?..)
// form 4 tvf_lateral  u8 report, u8 style, u8 nextra, then nextra values
//                     (a report of every row of the models table)
// form 5 merge_models u8 mods, then 4 values: groupfit_merge over models and two
//                     bound values
// value     := u8 kind (mod value_kind_count), then the kind's payload
// Aggregates (forms 0, 1, 5) keep their last BLOB result in a register that
// later values can use (kind v_register): model -> report pipelines.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string>

namespace gf_fuzz::sql {

inline constexpr int max_calls = 8;

enum form : std::uint8_t {
    f_agg_values = 0,
    f_agg_table,
    f_tvf,
    f_limit,
    f_tvf_lateral,
    f_merge_models,
    form_count
};

enum value_kind : std::uint8_t {
    v_null = 0,        // NULL
    v_small_int,       // u8 as int8
    v_int64,           // u64
    v_real_bits,       // u64 reinterpreted as a double (NaN binds as NULL in SQLite)
    v_real_special,    // u8 index into special_reals
    v_text,            // bytes (any bytes: NUL, invalid UTF-8)
    v_text_special,    // u8 index into special_texts
    v_blob,            // bytes
    v_model,           // u8 index into the models table (valid BLOBs)
    v_model_mutated,   // u8 model, u8 edits, edits x (u16 pos, u8 xor), u8 fix (bit 0: fix_blob)
    v_register,        // the last aggregate BLOB of this input (NULL before one)
    v_options,         // u8 count, count x u8 index into option_items, joined with "; "
    v_weights,         // u8 index into weight_texts
    v_table_cell,      // u8 row, u8 column of table t
    v_zeroblob,        // u16 size: sqlite3_bind_zeroblob
    value_kind_count
};

inline constexpr const char* aggregates[] = {"groupfit", "groupfit_weighted", "groupfit_merge"};
inline constexpr std::size_t aggregate_count = sizeof aggregates / sizeof *aggregates;

inline constexpr const char* reports[] = {"groupfit_coef",  "groupfit_levels",  "groupfit_deviations",
                                          "groupfit_tests", "groupfit_summary", "groupfit_pairs",
                                          "groupfit_contrast"};
inline constexpr std::size_t report_count = sizeof reports / sizeof *reports;

/// Columns of the fixed table t (fuzz_sql.cpp fills it).
inline constexpr const char* table_columns[] = {"g", "s", "r", "b", "y", "x1", "x2", "w", "n"};
inline constexpr std::size_t table_column_count = sizeof table_columns / sizeof *table_columns;

inline constexpr double special_reals[] = {
    0.0, -0.0, 1.0, -1.0, 0.5, 1e308, -1e308, 1.7976931348623157e308, 5e-324, -5e-324,
    2.2250738585072014e-308, 1e-300, 1e300, 9007199254740992.0, 9007199254740993.0,
    9223372036854775808.0, -9223372036854775808.0, 1e19, 3.0, 2.5, 1e-10, 1e10,
    __builtin_inf(), -__builtin_inf()};
inline constexpr std::size_t special_real_count = sizeof special_reals / sizeof *special_reals;

inline constexpr const char* special_texts[] = {
    "", " ", "3.5", " +1 ", "-0", "1e400", "1e-400", "nan", "NaN", "inf", "-Infinity", "0x10",
    "1,5", "12abc", "a", "b", "c", "d", "1", "2", "4", "8", "levels", "covariates", "x1", "x2",
    "north", "\xff\xfe", "\xc3\xa9", "a\"b", "a,b", "a;b", "a=b", "9223372036854775808"};
inline constexpr std::size_t special_text_count = sizeof special_texts / sizeof *special_texts;

inline constexpr const char* option_items[] = {
    "coding=dummy", "coding=effect", "coding=weighted_effect", "coding=helmert",
    "coding=reverse_helmert", "coding=successive", "coding=polynomial", "coding=custom",
    "custom=1,-1,0,0/0,1,-1,0/0,0,1,-1", "custom=1,-1/1,1", "spacing=values", "spacing=equal",
    "base=a", "base=2", "base=north", "order=d,c", "order=8,1", "order=b", "conf=0.99",
    "conf=0.5", "conf=1e-9", "names=grp, u, v", "names=g", "ss=1", "ss=2", "ss=3",
    "at=x1:0", "at=x1:1e300, x2:-1", "adjust=none", "adjust=bonferroni", "adjust=holm",
    "adjust=sidak", "adjust=bh", "adjust=tukey", "adjust=scheffe", "adjust=dunnett", "vs=a",
    "vs=1", "vs=north", "side=greater", "side=less", "side=two_sided", "coding=bogus", "base",
    "\"a;b\"=1", "order=\"a\",\"b\""};
inline constexpr std::size_t option_item_count = sizeof option_items / sizeof *option_items;

inline constexpr const char* weight_texts[] = {
    "a=1, b=-1", "a=1, b=-0.5, c=-0.5; a=1, d=-1", "1=1, 2=-1", "1=1, 2=-1; 4=1, 8=-1",
    "a=1", "a=0", "a=1, a=-1", "north=1, south=-1", "1=1, 2=1, 4=1, 8=1", "x'01'=1, x'02'=-1",
    "0.5=1, 1.5=-1", "a=1e308, b=-1e308", "a=1, b=-1; a=2, b=-2", "a=x", "=1", ";", "",
    "\"a\"=1, \"b\"=-1", "a=1, b=-1, c=0, d=0"};
inline constexpr std::size_t weight_text_count = sizeof weight_texts / sizeof *weight_texts;

/// Front-to-back reader; past the end every read gives zeros.
struct reader {
    const std::uint8_t* p;
    std::size_t n, at = 0;
    bool empty() const { return at >= n; }
    std::uint8_t u8() { return at < n ? p[at++] : 0; }
    std::uint16_t u16() {
        const std::uint16_t lo = u8();
        return static_cast<std::uint16_t>(lo | (u8() << 8));
    }
    std::uint64_t u64() {
        std::uint64_t v = 0;
        for (int k = 0; k < 8; ++k) v |= std::uint64_t(u8()) << (8 * k);
        return v;
    }
    /// u8 length (255: u16 length follows), then that many bytes (fewer at the end).
    std::string bytes() {
        std::size_t len = u8();
        if (len == 255) len = u16();
        if (len > n - at) len = at < n ? n - at : 0;
        std::string s(reinterpret_cast<const char*>(p + at), len);
        at += len;
        return s;
    }
};

/// The mirror image, for writing seeds.
struct writer {
    std::string out;
    writer& u8(unsigned v) {
        out += static_cast<char>(v & 0xff);
        return *this;
    }
    writer& u16(unsigned v) { return u8(v).u8(v >> 8); }
    writer& u64(std::uint64_t v) {
        for (int k = 0; k < 8; ++k) u8(static_cast<unsigned>(v >> (8 * k)));
        return *this;
    }
    writer& bytes(const std::string& s) {
        if (s.size() >= 255) u8(255).u16(static_cast<unsigned>(s.size()));
        else u8(static_cast<unsigned>(s.size()));
        out += s;
        return *this;
    }
};

}  // namespace gf_fuzz::sql
