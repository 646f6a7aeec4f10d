// Shared helpers of the golden-file tests (test_oracle, test_compare, test_cross): reading
// CSV files (RFC 4180), numbers and text, the golden files' header lines, and
// the MD5 digest (RFC 1321) with which a header pins the data file it was
// computed from.
#pragma once

#include <cctype>
#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>
#include <utility>
#include <vector>

namespace gf_golden {

// ---------------------------------------------------------------------------
// CSV (RFC 4180: quoted fields, "" inside quotes; LF or CRLF line ends)
// ---------------------------------------------------------------------------
struct csv_field {
    std::string text;
    bool quoted = false;
};
using csv_row = std::vector<csv_field>;

inline std::vector<csv_row> parse_csv(const std::string& body) {
    std::vector<csv_row> rows;
    csv_row row;
    csv_field cur;
    bool in_quotes = false, any = false;
    for (std::size_t i = 0; i < body.size(); ++i) {
        const char c = body[i];
        if (in_quotes) {
            if (c == '"') {
                if (i + 1 < body.size() && body[i + 1] == '"') cur.text += '"', ++i;
                else in_quotes = false;
            } else {
                cur.text += c;
            }
            continue;
        }
        if (c == '"' && cur.text.empty()) {
            in_quotes = true, cur.quoted = true, any = true;
        } else if (c == ',') {
            row.push_back(std::move(cur)), cur = {}, any = true;
        } else if (c == '\n' || c == '\r') {
            if (c == '\r' && i + 1 < body.size() && body[i + 1] == '\n') ++i;
            if (any || !cur.text.empty()) row.push_back(std::move(cur));
            if (!row.empty()) rows.push_back(std::move(row));
            row = {}, cur = {}, any = false;
        } else {
            cur.text += c, any = true;
        }
    }
    if (any || !cur.text.empty()) row.push_back(std::move(cur));
    if (!row.empty()) rows.push_back(std::move(row));
    return rows;
}

inline bool read_file(const std::filesystem::path& p, std::string& out) {
    std::ifstream in(p, std::ios::binary);
    if (!in) return false;
    std::ostringstream ss;
    ss << in.rdbuf();
    out = ss.str();
    return true;
}

// ---------------------------------------------------------------------------
// Numbers and text
// ---------------------------------------------------------------------------
// Full-string number parse; false for empty, partial or non-finite text.
inline bool parse_double(const std::string& s, double& v) {
    if (s.empty()) return false;
    char* end = nullptr;
    v = std::strtod(s.c_str(), &end);
    return *end == '\0' && std::isfinite(v);
}

inline std::string fmt17(double v) {
    char b[40];
    std::snprintf(b, sizeof b, "%.17g", v);
    return b;
}

inline std::string trim(std::string s) {
    while (!s.empty() && std::isspace(static_cast<unsigned char>(s.front()))) s.erase(s.begin());
    while (!s.empty() && std::isspace(static_cast<unsigned char>(s.back()))) s.pop_back();
    return s;
}

inline std::vector<std::string> split(const std::string& s, const std::string& sep) {
    std::vector<std::string> out;
    std::size_t pos = 0;
    for (;;) {
        const std::size_t at = s.find(sep, pos);
        out.push_back(s.substr(pos, at == std::string::npos ? std::string::npos : at - pos));
        if (at == std::string::npos) break;
        pos = at + sep.size();
    }
    return out;
}

inline bool starts_with(const std::string& s, const std::string& p) { return s.rfind(p, 0) == 0; }

// ---------------------------------------------------------------------------
// The two '#' lines that open a golden file: the generation line, then
// "data: PATH (md5 X); model: y ~ g + x1 + ...; analytic weights: w;
// rows used: N; levels: a b c" (parts optional, in any order).
// ---------------------------------------------------------------------------

struct golden_header {
    std::string header1, header2;  // the two comment lines as written
    std::string data_path, md5, response, group, weight;
    std::vector<std::string> covariates, levels;
    long rows_used = -1;
    std::size_t comment_lines = 0;  // '#' lines before the CSV (for line numbers)
};

/// Splits a golden file's text into its header (parsed into h) and the CSV
/// text that follows; returns an empty string, or what is wrong.
inline std::string parse_golden_header(const std::string& body, golden_header& h, std::string& csv) {
    std::vector<std::string> comments;
    std::istringstream in(body);
    std::string line;
    while (std::getline(in, line)) {
        if (!line.empty() && line.back() == '\r') line.pop_back();
        if (starts_with(line, "#")) comments.push_back(line);
        else csv += line + "\n";
    }
    if (comments.size() < 2) return "expected two '#' header lines";
    h.comment_lines = comments.size();
    h.header1 = comments[0];
    h.header2 = comments[1];
    for (const std::string& part0 : split(comments[1].substr(1), ";")) {
        const std::string part = trim(part0);
        if (starts_with(part, "data: ")) {
            std::string d = part.substr(6);
            const auto md5at = d.find(" (md5 ");
            if (md5at != std::string::npos) {
                h.md5 = d.substr(md5at + 6);
                if (!h.md5.empty() && h.md5.back() == ')') h.md5.pop_back();
                d = d.substr(0, md5at);
            }
            h.data_path = trim(d);
        } else if (starts_with(part, "model: ")) {
            const auto lr = split(part.substr(7), "~");
            if (lr.size() != 2) return "cannot parse the model in '" + part + "'";
            h.response = trim(lr[0]);
            const auto terms = split(lr[1], "+");
            h.group = trim(terms[0]);
            for (std::size_t i = 1; i < terms.size(); ++i) h.covariates.push_back(trim(terms[i]));
        } else if (starts_with(part, "analytic weights: ")) {
            h.weight = trim(part.substr(18));
        } else if (starts_with(part, "rows used: ")) {
            h.rows_used = std::strtol(part.c_str() + 11, nullptr, 10);
        } else if (starts_with(part, "levels: ")) {
            for (const auto& l : split(part.substr(8), " "))
                if (!l.empty()) h.levels.push_back(l);
        }
    }
    return {};
}

// ---------------------------------------------------------------------------
// MD5 (RFC 1321)
// ---------------------------------------------------------------------------
inline std::string md5_hex(const std::string& msg) {
    static const std::uint32_t K[64] = {
        0xd76aa478, 0xe8c7b756, 0x242070db, 0xc1bdceee, 0xf57c0faf, 0x4787c62a, 0xa8304613,
        0xfd469501, 0x698098d8, 0x8b44f7af, 0xffff5bb1, 0x895cd7be, 0x6b901122, 0xfd987193,
        0xa679438e, 0x49b40821, 0xf61e2562, 0xc040b340, 0x265e5a51, 0xe9b6c7aa, 0xd62f105d,
        0x02441453, 0xd8a1e681, 0xe7d3fbc8, 0x21e1cde6, 0xc33707d6, 0xf4d50d87, 0x455a14ed,
        0xa9e3e905, 0xfcefa3f8, 0x676f02d9, 0x8d2a4c8a, 0xfffa3942, 0x8771f681, 0x6d9d6122,
        0xfde5380c, 0xa4beea44, 0x4bdecfa9, 0xf6bb4b60, 0xbebfbc70, 0x289b7ec6, 0xeaa127fa,
        0xd4ef3085, 0x04881d05, 0xd9d4d039, 0xe6db99e5, 0x1fa27cf8, 0xc4ac5665, 0xf4292244,
        0x432aff97, 0xab9423a7, 0xfc93a039, 0x655b59c3, 0x8f0ccc92, 0xffeff47d, 0x85845dd1,
        0x6fa87e4f, 0xfe2ce6e0, 0xa3014314, 0x4e0811a1, 0xf7537e82, 0xbd3af235, 0x2ad7d2bb,
        0xeb86d391};
    static const int S[64] = {7, 12, 17, 22, 7, 12, 17, 22, 7, 12, 17, 22, 7, 12, 17, 22,
                              5, 9,  14, 20, 5, 9,  14, 20, 5, 9,  14, 20, 5, 9,  14, 20,
                              4, 11, 16, 23, 4, 11, 16, 23, 4, 11, 16, 23, 4, 11, 16, 23,
                              6, 10, 15, 21, 6, 10, 15, 21, 6, 10, 15, 21, 6, 10, 15, 21};
    std::string m = msg;
    const std::uint64_t bits = std::uint64_t(msg.size()) * 8;
    m += char(0x80);
    while (m.size() % 64 != 56) m += char(0);
    for (int i = 0; i < 8; ++i) m += char((bits >> (8 * i)) & 0xff);
    std::uint32_t h[4] = {0x67452301, 0xefcdab89, 0x98badcfe, 0x10325476};
    auto rotl = [](std::uint32_t x, int c) { return (x << c) | (x >> (32 - c)); };
    for (std::size_t off = 0; off < m.size(); off += 64) {
        std::uint32_t w[16];
        for (int i = 0; i < 16; ++i) {
            w[i] = 0;
            for (int b = 0; b < 4; ++b)
                w[i] |= std::uint32_t(static_cast<unsigned char>(m[off + 4 * i + b])) << (8 * b);
        }
        std::uint32_t a = h[0], b = h[1], c = h[2], d = h[3];
        for (int i = 0; i < 64; ++i) {
            std::uint32_t f;
            int g;
            if (i < 16) f = (b & c) | (~b & d), g = i;
            else if (i < 32) f = (d & b) | (~d & c), g = (5 * i + 1) % 16;
            else if (i < 48) f = b ^ c ^ d, g = (3 * i + 5) % 16;
            else f = c ^ (b | ~d), g = (7 * i) % 16;
            const std::uint32_t tmp = d;
            d = c, c = b;
            b = b + rotl(a + f + K[i] + w[g], S[i]);
            a = tmp;
        }
        h[0] += a, h[1] += b, h[2] += c, h[3] += d;
    }
    static const char hex[] = "0123456789abcdef";
    std::string out;
    for (auto v : h)
        for (int i = 0; i < 4; ++i) {
            const unsigned byte = (v >> (8 * i)) & 0xff;
            out += hex[byte >> 4], out += hex[byte & 15];
        }
    return out;
}

}  // namespace gf_golden
