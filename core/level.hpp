// groupfit core: a level of the grouping argument (one cell of the model).
//
// A level keeps the SQLite value it came from: an integer, a real, a text or a
// blob. Reals that hold an integral value are stored as integers, so that
// 3 and 3.0 name the same level, as they compare equal in SQL. Levels sort the
// way SQLite's ORDER BY sorts them with the BINARY collation: numbers by value
// first, then text by bytes, then blobs by bytes.
#pragma once

#include <compare>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

namespace groupfit {

enum class level_kind : std::uint8_t { integer = 1, real = 2, text = 3, blob = 4 };

struct level {
    level_kind kind = level_kind::integer;
    std::int64_t i = 0;   // kind == integer
    double r = 0.0;       // kind == real (never integral, never NaN)
    std::string bytes;    // kind == text or blob

    static level from_integer(std::int64_t v);
    static level from_real(double v);  // normalises integral reals to integers
    static level from_text(std::string_view s);
    static level from_blob(std::string_view s);

    bool is_numeric() const { return kind == level_kind::integer || kind == level_kind::real; }
    double numeric_value() const { return kind == level_kind::integer ? double(i) : r; }

    /// The label used in reports and in options (base=, order=): the integer in
    /// decimal, the real in its shortest round-trip form, the text itself, or a
    /// blob as x'hex'.
    std::string label() const;

    /// A compact byte key that identifies the level exactly (used for hashing).
    std::string key() const;
};

/// SQLite ORDER BY order (numbers, then text, then blobs).
std::strong_ordering compare(const level& a, const level& b);
inline bool operator<(const level& a, const level& b) { return compare(a, b) < 0; }
inline bool operator==(const level& a, const level& b) { return compare(a, b) == 0; }

/// Up to 20 labels joined by ", ", then ", ... (N in all)" when there are more:
/// the list that error messages show.
std::string label_list(const std::vector<std::string>& labels);
/// Throws groupfit::error "<where> names an unknown level '<label>' (levels:
/// <label_list>)": an option or a weights text naming a level that the model
/// does not have. `where` says what named it ("options: base", "weights: a
/// contrast", ...).
[[noreturn]] void throw_unknown_level(const std::string& where, const std::string& label,
                                      const std::vector<std::string>& labels);

/// Shortest decimal text that reads back as exactly the same double. Locale
/// independent (std::to_chars).
std::string shortest_real(double v);
/// A double with at most `digits` significant digits, for labels ("0.5*a").
std::string short_real(double v, int digits = 6);
/// Parses the whole text as a finite decimal number, ignoring surrounding
/// ASCII white space; a leading '+' is allowed. Locale independent
/// (std::from_chars); rejects empty text, hex, inf and nan. Returns false when
/// the text is not such a number.
bool parse_real(std::string_view text, double& out);

}  // namespace groupfit
