// Writes the seed inputs of every harness (tests/fuzz/corpus/<harness>/seed-*):
//   make_corpus <source dir> <corpus dir>
// Model BLOBs are written by this build's core (the bytes groupfit() returns
// for the same rows), plus the golden BLOBs of every format version from
// tests/golden_blobs. Option and weight texts cover every key and form;
// fuzz_sql seeds are encoded calls (sql_input.hpp) that build models and run
// every report on them. Existing regression inputs (regress-*) are left alone.
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <string>
#include <vector>

#include "fuzz_common.hpp"
#include "sql_input.hpp"

namespace fs = std::filesystem;
using namespace groupfit;

namespace {

void write(const fs::path& dir, const std::string& name, const std::string& bytes) {
    fs::create_directories(dir);
    std::ofstream out(dir / ("seed-" + name), std::ios::binary);
    out.write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
    if (!out) throw std::runtime_error("cannot write " + (dir / name).string());
}

std::string read_hex(const fs::path& p) {
    std::ifstream in(p);
    std::string hex, out;
    in >> hex;
    if (hex.empty()) throw std::runtime_error("cannot read " + p.string());
    for (std::size_t i = 0; i + 1 < hex.size(); i += 2)
        out += static_cast<char>(std::stoi(hex.substr(i, 2), nullptr, 16));
    return out;
}

std::vector<std::pair<std::string, std::string>> model_seeds(const fs::path& src) {
    std::vector<std::pair<std::string, std::string>> out;
    const char* names[] = {"text-2cov", "int-0cov", "weighted-aliased"};
    for (std::size_t i = 0; i < gf_fuzz::fixed_models().size(); ++i)
        out.emplace_back(std::string("model-") + names[i], gf_fuzz::fixed_models()[i].s.serialize());
    limits lim;
    gf_fuzz::lcg r{11};
    {  // real and blob levels, one covariate
        summary s(1, false);
        const level lv[] = {level::from_real(0.5), level::from_real(-2.25), level::from_blob("\x01"),
                            level::from_blob(std::string("\x00\xff", 2))};
        for (int i = 0; i < 12; ++i) {
            const double v[] = {r.next(), 1.0 + i % 4 + r.next()};
            s.add_row(s.cell_for(lv[i % 4], lim), v, 1.0);
        }
        out.emplace_back("model-real-blob-levels", s.serialize());
    }
    {  // only dropped rows: a BLOB with no cells
        summary s(1, false);
        s.drop(drop_reason::null_response);
        s.drop(drop_reason::null_covariate);
        out.emplace_back("model-no-cells", s.serialize());
    }
    {  // one level, one row
        summary s(0, false);
        const double y = 4.0;
        s.add_row(s.cell_for(level::from_integer(-7), lim), &y, 1.0);
        out.emplace_back("model-one-row", s.serialize());
    }
    {  // two levels with extreme integer labels and values, weighted
        summary s(0, true);
        const double ys[] = {1e300, -1e300, 5e-324, 1.0};
        for (int i = 0; i < 4; ++i)
            s.add_row(s.cell_for(level::from_integer(i % 2 ? INT64_MIN : INT64_MAX), lim), &ys[i],
                      i + 0.5);
        out.emplace_back("model-extremes", s.serialize());
    }
    {  // five covariates, three levels
        summary s(5, false);
        for (int i = 0; i < 15; ++i) {
            double v[6];
            for (int j = 0; j < 5; ++j) v[j] = r.next() * (j + 1);
            v[5] = v[0] - v[3] + r.next();
            s.add_row(s.cell_for(level::from_text(std::string(1, char('p' + i % 3))), lim), v, 1.0);
        }
        out.emplace_back("model-5cov", s.serialize());
    }
    out.emplace_back("golden-v1", read_hex(src / "tests/golden_blobs/model_v1.hex"));
    out.emplace_back("golden-v2", read_hex(src / "tests/golden_blobs/model_v2.hex"));
    return out;
}

// ------------------------------------------------------------ fuzz_sql seeds

using gf_fuzz::sql::writer;
namespace q = gf_fuzz::sql;

// Values.
writer& v_null(writer& w) { return w.u8(q::v_null); }
writer& v_model(writer& w, int i) { return w.u8(q::v_model).u8(i); }
writer& v_reg(writer& w) { return w.u8(q::v_register); }
writer& v_opts(writer& w, std::initializer_list<int> items) {
    w.u8(q::v_options).u8(static_cast<unsigned>(items.size()));
    for (int i : items) w.u8(i);
    return w;
}
writer& v_weights(writer& w, int i) { return w.u8(q::v_weights).u8(i); }
writer& v_text(writer& w, const std::string& s) { return w.u8(q::v_text).bytes(s); }
writer& v_int(writer& w, std::int64_t i) { return w.u8(q::v_int64).u64(static_cast<std::uint64_t>(i)); }
writer& v_real(writer& w, int special) { return w.u8(q::v_real_special).u8(special); }

/// Index of an option item / weight text by its text (seeds stay readable).
int opt(const char* s) {
    for (std::size_t i = 0; i < q::option_item_count; ++i)
        if (std::string(q::option_items[i]) == s) return static_cast<int>(i);
    throw std::runtime_error(std::string("no option item ") + s);
}
int col(const char* s) {
    for (std::size_t i = 0; i < q::table_column_count; ++i)
        if (std::string(q::table_columns[i]) == s) return static_cast<int>(i);
    throw std::runtime_error(std::string("no column ") + s);
}

/// groupfit(<columns of t>) [GROUP BY ...]: the result goes to the register.
writer& agg_table(writer& w, int fn, std::initializer_list<const char*> cols, int mods = 0) {
    w.u8(q::f_agg_table).u8(fn).u8(static_cast<unsigned>(cols.size()));
    for (const char* c : cols) w.u8(col(c));
    return w.u8(mods);
}
/// report(register, options...)
writer& tvf_reg(writer& w, int report, int style, std::initializer_list<int> options) {
    w.u8(q::f_tvf).u8(report).u8(2).u8(style);
    v_reg(w);
    return v_opts(w, options);
}

std::vector<std::pair<std::string, std::string>> sql_seeds() {
    std::vector<std::pair<std::string, std::string>> out;
    for (int rep = 0; rep < static_cast<int>(q::report_count); ++rep) {  // every report of every model
        writer w;
        w.u8(q::f_tvf_lateral).u8(rep).u8(0).u8(rep == 6 ? 1 : 0);
        if (rep == 6) v_weights(w, 0);
        out.emplace_back(std::string("lateral-") + q::reports[rep], w.out);
    }
    {  // groupfit(y, s, x1, x2) then coef (effect), pairs (dunnett vs a), levels (at=)
        writer w;
        agg_table(w, 0, {"y", "s", "x1", "x2"});
        tvf_reg(w, 0, 0, {opt("coding=effect"), opt("base=a")});
        tvf_reg(w, 5, 0, {opt("adjust=dunnett"), opt("vs=a"), opt("side=greater")});
        tvf_reg(w, 1, 1, {opt("at=x1:0")});
        w.u8(q::f_tvf).u8(6).u8(3).u8(0);
        v_reg(w), v_weights(w, 1), v_opts(w, {opt("conf=0.99")});
        out.emplace_back("pipeline-text-2cov", w.out);
    }
    {  // weighted over integer levels, polynomial coding by value, tests type 1
        writer w;
        agg_table(w, 1, {"w", "y", "g"});
        tvf_reg(w, 0, 0, {opt("coding=polynomial"), opt("spacing=values")});
        tvf_reg(w, 3, 0, {opt("ss=1")});
        tvf_reg(w, 4, 2, {});
        out.emplace_back("pipeline-weighted", w.out);
    }
    {  // GROUP BY: one model per group, then merge them
        writer w;
        agg_table(w, 0, {"y", "s", "x1"}, 1);
        w.u8(q::f_merge_models).u8(0);
        v_int(w, 1), v_int(w, 2), v_reg(w), v_model(w, 1);
        tvf_reg(w, 2, 0, {});
        out.emplace_back("group-by-merge", w.out);
    }
    {  // fully fuzzed rows: 4 rows x 4 arguments of mixed types
        writer w;
        w.u8(q::f_agg_values).u8(1).u8(4).u8(4).u8(0);
        for (int row = 0; row < 4; ++row) {
            const int weight[] = {2, 4, 18, 19};  // special_reals 1, 0.5, 3, 2.5
            v_real(w, weight[row]), v_int(w, row * 3 - 2), v_text(w, row % 2 ? "a" : "b");
            if (row == 3) v_text(w, " 2.5 "); else v_real(w, 20 + row % 2);
        }
        tvf_reg(w, 5, 0, {opt("adjust=holm")});
        out.emplace_back("values-mixed", w.out);
    }
    {  // many covariates: over the default limit of 32
        writer w;
        w.u8(q::f_agg_values).u8(0).u8(0x80 | 10).u8(2).u8(0);
        for (int k = 0; k < 2 * 40; ++k) v_real(w, k % 6);
        out.emplace_back("values-many-args", w.out);
    }
    {  // limits: 2 levels, then a model with 4
        writer w;
        w.u8(q::f_limit).u8(2);
        v_text(w, "levels"), v_int(w, 2);
        agg_table(w, 0, {"y", "g"});
        w.u8(q::f_limit).u8(2);
        v_text(w, "covariates"), v_int(w, 0);
        w.u8(q::f_tvf).u8(0).u8(1).u8(0);
        v_model(w, 1);
        out.emplace_back("limits", w.out);
    }
    {  // mutated models with a fixed checksum into every report
        writer w;
        for (int rep = 0; rep < 7; ++rep) {
            w.u8(q::f_tvf).u8(rep).u8(rep == 6 ? 2 : 1).u8(0);
            w.u8(q::v_model_mutated).u8(rep).u8(2).u16(60 + rep).u8(0x40).u16(90).u8(1).u8(1);
            if (rep == 6) v_weights(w, 0);
        }
        out.emplace_back("mutated-models", w.out);
    }
    {  // IN over several models; hidden columns as constraints
        writer w;
        w.u8(q::f_tvf).u8(5).u8(3).u8(3);
        v_model(w, 0), v_model(w, 1), v_null(w);
        w.u8(q::f_tvf).u8(6).u8(3).u8(1);
        v_model(w, 1), v_weights(w, 2), v_null(w);
        out.emplace_back("in-and-hidden", w.out);
    }
    return out;
}

}  // namespace

int main(int argc, char** argv) {
    if (argc != 3) {
        std::cerr << "usage: make_corpus <source dir> <corpus dir>\n";
        return 2;
    }
    const fs::path src = argv[1], dir = argv[2];
    try {
        for (const auto& [name, bytes] : model_seeds(src)) write(dir / "fuzz_blob", name, bytes);
        int i = 0;
        for (const char* item : q::option_items) write(dir / "fuzz_options", "item-" + std::to_string(i++), item);
        write(dir / "fuzz_options", "combo-coef",
              "coding=custom; custom=1,-1,0,0/0,1,-1,0/0,0,1,-1; order=d,c; conf=0.9; "
              "names=grp, u, v");
        write(dir / "fuzz_options", "combo-pairs", "adjust=dunnett; vs=\"b\"; side=less; at=x1:3");
        write(dir / "fuzz_options", "combo-ss", "ss=2; coding=weighted_effect; base=c; names=k");
        i = 0;
        for (const char* t : q::weight_texts) write(dir / "fuzz_weights", "w-" + std::to_string(i++), t);
        for (const auto& [name, bytes] : sql_seeds()) write(dir / "fuzz_sql", name, bytes);
    } catch (const std::exception& e) {
        std::cerr << "make_corpus: " << e.what() << "\n";
        return 1;
    }
    return 0;
}
