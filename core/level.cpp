#include "level.hpp"

#include <charconv>
#include <cmath>
#include <cstring>

#include "error.hpp"

namespace groupfit {

level level::from_integer(std::int64_t v) {
    level l;
    l.kind = level_kind::integer;
    l.i = v;
    return l;
}

level level::from_real(double v) {
    // 2^63 is exactly representable; reals in [-2^63, 2^63) that are integral
    // convert to int64 without loss.
    if (std::nearbyint(v) == v && v >= -9223372036854775808.0 && v < 9223372036854775808.0)
        return from_integer(static_cast<std::int64_t>(v));
    level l;
    l.kind = level_kind::real;
    l.r = v;
    return l;
}

level level::from_text(std::string_view s) {
    level l;
    l.kind = level_kind::text;
    l.bytes.assign(s);
    return l;
}

level level::from_blob(std::string_view s) {
    level l;
    l.kind = level_kind::blob;
    l.bytes.assign(s);
    return l;
}

std::string label_list(const std::vector<std::string>& labels) {
    std::string s;
    for (std::size_t i = 0; i < labels.size() && i < 20; ++i) s += (i ? ", " : "") + labels[i];
    if (labels.size() > 20) s += ", ... (" + std::to_string(labels.size()) + " in all)";
    return s;
}

void throw_unknown_level(const std::string& where, const std::string& label,
                         const std::vector<std::string>& labels) {
    throw error(where + " names an unknown level '" + label + "' (levels: " + label_list(labels) + ")");
}

std::string shortest_real(double v) {
    char buf[40];
    const auto r = std::to_chars(buf, buf + sizeof buf, v);
    return std::string(buf, r.ptr);
}

std::string short_real(double v, int digits) {
    char buf[40];
    const auto r = std::to_chars(buf, buf + sizeof buf, v, std::chars_format::general, digits);
    return std::string(buf, r.ptr);
}

bool parse_real(std::string_view t, double& out) {
    auto space = [](char c) { return c == ' ' || c == '\t' || c == '\n' || c == '\r' || c == '\f' || c == '\v'; };
    while (!t.empty() && space(t.front())) t.remove_prefix(1);
    while (!t.empty() && space(t.back())) t.remove_suffix(1);
    if (!t.empty() && t.front() == '+') t.remove_prefix(1);
    if (t.empty()) return false;
    double v = 0;
    const auto r = std::from_chars(t.data(), t.data() + t.size(), v, std::chars_format::general);
    if (r.ec != std::errc() || r.ptr != t.data() + t.size() || !std::isfinite(v)) return false;
    out = v;
    return true;
}

std::string level::label() const {
    switch (kind) {
    case level_kind::integer: return std::to_string(i);
    case level_kind::real: return shortest_real(r);
    case level_kind::text: return bytes;
    case level_kind::blob: {
        static const char hex[] = "0123456789abcdef";
        std::string out = "x'";
        for (unsigned char c : bytes) {
            out += hex[c >> 4];
            out += hex[c & 15];
        }
        return out + "'";
    }
    }
    return {};
}

std::string level::key() const {
    std::string k(1, static_cast<char>(kind));
    switch (kind) {
    case level_kind::integer: k.append(reinterpret_cast<const char*>(&i), sizeof i); break;
    case level_kind::real: k.append(reinterpret_cast<const char*>(&r), sizeof r); break;
    default: k += bytes; break;
    }
    return k;
}

static int kind_rank(level_kind k) {
    return k == level_kind::text ? 1 : k == level_kind::blob ? 2 : 0;
}

std::strong_ordering compare(const level& a, const level& b) {
    int ra = kind_rank(a.kind), rb = kind_rank(b.kind);
    if (ra != rb) return ra <=> rb;
    if (ra == 0) {
        if (a.kind == level_kind::integer && b.kind == level_kind::integer) return a.i <=> b.i;
        double x = a.numeric_value(), y = b.numeric_value();
        if (x < y) return std::strong_ordering::less;
        if (x > y) return std::strong_ordering::greater;
        // Equal as doubles: an integer level and a real level never compare equal
        // (reals are never integral), so order integers first for a total order.
        return kind_rank(a.kind) == 0 && a.kind != b.kind
                   ? (a.kind == level_kind::integer ? std::strong_ordering::less
                                                    : std::strong_ordering::greater)
                   : std::strong_ordering::equal;
    }
    int c = a.bytes.compare(b.bytes);  // std::string compares as unsigned bytes
    return c < 0 ? std::strong_ordering::less
                 : c > 0 ? std::strong_ordering::greater : std::strong_ordering::equal;
}

}  // namespace groupfit
