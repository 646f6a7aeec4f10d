// libFuzzer harness: the SQLite glue (ext/groupfit.cpp) through the real
// SQLite C API, with random argument values and types for every function the
// extension registers.
//
// The extension's source is compiled into this binary (instrumented like the
// core) and registered with sqlite3_auto_extension, so every connection gets
// it exactly as `.load` would give it; SQLite itself is the system library.
// One :memory: connection is opened once and holds a small table t and a table
// `models` of valid model BLOBs made from t by the extension. Each input is
// decoded by sql_input.hpp into up to 8 statements from fixed templates whose
// arguments are bound values of every type (NULL, integers, reals including
// huge, tiny and infinite ones, texts with any bytes, blobs, valid and mutated
// model BLOBs, options and weights texts, the previous aggregate's result).
//
// Any SQLite error is an expected outcome. Findings are crashes, sanitizer
// reports, leaks, an error message that says "internal error" (a C++
// exception other than groupfit::error reached the glue: users would get a
// message that was not written for them), and a model BLOB returned by an
// aggregate that does not decode again.
#include <sqlite3.h>

#include <algorithm>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <vector>

#include "fuzz_common.hpp"
#include "sql_input.hpp"

extern "C" int sqlite3_groupfit_init(sqlite3* db, char** err, const sqlite3_api_routines* api);

namespace {

using namespace gf_fuzz::sql;

struct val {
    int type = SQLITE_NULL;  // SQLITE_NULL, _INTEGER, _FLOAT, _TEXT, _BLOB; 0: zeroblob
    std::int64_t i = 0;
    double d = 0.0;
    std::string s;
    int zero = 0;
};

struct state {
    sqlite3* db = nullptr;
    std::vector<std::string> models;      // the models table, id order
    std::vector<std::vector<val>> t_rows; // a copy of table t
    std::string reg;                      // last aggregate BLOB of this input
    bool have_reg = false;
};
state g;
// GF_FUZZ_VERBOSE=1 prints every statement and its outcome (for reading seeds).
const bool verbose = std::getenv("GF_FUZZ_VERBOSE") != nullptr;

/// The glue reports a C++ exception other than groupfit::error as
/// "<function>: internal error: ..." (ext/groupfit.cpp, guarded). Only that
/// prefix counts: a message may quote user text that says "internal error".
void check_message(const char* sql, const char* msg) {
    if (!msg) return;
    const char* colon = std::strchr(msg, ':');
    if (colon && std::strncmp(colon, ": internal error", 16) == 0)
        gf_fuzz::finding(std::string("\"internal error\" from ") + sql + ": " + msg);
}

/// A model BLOB that an aggregate returned must decode (under the widest
/// limits groupfit_limit allows): the extension must never hand out a model
/// that its own reports reject.
void check_model(const std::string& sql, const std::string& blob) {
    groupfit::limits widest;
    widest.max_levels = 10000000;
    widest.max_covariates = 120;
    try {
        (void)groupfit::summary::deserialize(blob, widest);
    } catch (const groupfit::error& e) {
        gf_fuzz::finding("the aggregate returned a model BLOB that cannot be read back (" +
                         std::string(e.what()) + "): " + sql);
    }
}

void bind(sqlite3_stmt* st, int at, const val& v) {
    switch (v.type) {
    case SQLITE_INTEGER: sqlite3_bind_int64(st, at, v.i); break;
    case SQLITE_FLOAT: sqlite3_bind_double(st, at, v.d); break;
    case SQLITE_TEXT:
        sqlite3_bind_text64(st, at, v.s.data(), v.s.size(), SQLITE_TRANSIENT, SQLITE_UTF8);
        break;
    case SQLITE_BLOB: sqlite3_bind_blob64(st, at, v.s.data(), v.s.size(), SQLITE_TRANSIENT); break;
    case 0: sqlite3_bind_zeroblob(st, at, v.zero); break;
    default: sqlite3_bind_null(st, at); break;
    }
}

/// Prepares, binds and steps one statement, reading every column of every
/// row; keeps the first column's BLOB in the register when `capture`.
void run(const std::string& sql, const std::vector<val>& binds, bool capture) {
    sqlite3_stmt* st = nullptr;
    if (sqlite3_prepare_v2(g.db, sql.c_str(), -1, &st, nullptr) != SQLITE_OK) {
        if (verbose) std::fprintf(stderr, "%s\n  prepare error: %s\n", sql.c_str(), sqlite3_errmsg(g.db));
        check_message(sql.c_str(), sqlite3_errmsg(g.db));
        sqlite3_finalize(st);
        return;
    }
    for (std::size_t k = 0; k < binds.size(); ++k) bind(st, static_cast<int>(k) + 1, binds[k]);
    int rc, rows = 0;
    while ((rc = sqlite3_step(st)) == SQLITE_ROW && ++rows < 100000) {
        const int n = sqlite3_column_count(st);
        for (int c = 0; c < n; ++c) {
            switch (sqlite3_column_type(st, c)) {
            case SQLITE_INTEGER: (void)sqlite3_column_int64(st, c); break;
            case SQLITE_FLOAT: (void)sqlite3_column_double(st, c); break;
            case SQLITE_TEXT:
                (void)sqlite3_column_text(st, c);
                (void)sqlite3_column_bytes(st, c);
                break;
            case SQLITE_BLOB: {
                const void* b = sqlite3_column_blob(st, c);
                const int len = sqlite3_column_bytes(st, c);
                if (capture && c == 0) {
                    g.reg.assign(static_cast<const char*>(b ? b : ""), len);
                    g.have_reg = true;
                    check_model(sql, g.reg);
                }
                break;
            }
            default: break;
            }
        }
    }
    if (verbose)
        std::fprintf(stderr, "%s\n  %d binds, %d rows, %s\n", sql.c_str(), static_cast<int>(binds.size()),
                     rows, rc == SQLITE_DONE ? "done" : sqlite3_errmsg(g.db));
    if (rc != SQLITE_DONE && rc != SQLITE_ROW) check_message(sql.c_str(), sqlite3_errmsg(g.db));
    sqlite3_finalize(st);
}

val read_value(reader& r) {
    val v;
    switch (r.u8() % value_kind_count) {
    case v_null: break;
    case v_small_int: v.type = SQLITE_INTEGER, v.i = static_cast<std::int8_t>(r.u8()); break;
    case v_int64: v.type = SQLITE_INTEGER, v.i = static_cast<std::int64_t>(r.u64()); break;
    case v_real_bits: {
        const std::uint64_t bits = r.u64();
        v.type = SQLITE_FLOAT;
        std::memcpy(&v.d, &bits, sizeof v.d);
        break;
    }
    case v_real_special: v.type = SQLITE_FLOAT, v.d = special_reals[r.u8() % special_real_count]; break;
    case v_text: v.type = SQLITE_TEXT, v.s = r.bytes(); break;
    case v_text_special: v.type = SQLITE_TEXT, v.s = special_texts[r.u8() % special_text_count]; break;
    case v_blob: v.type = SQLITE_BLOB, v.s = r.bytes(); break;
    case v_model: v.type = SQLITE_BLOB, v.s = g.models[r.u8() % g.models.size()]; break;
    case v_model_mutated: {
        v.type = SQLITE_BLOB;
        v.s = g.models[r.u8() % g.models.size()];
        const int edits = r.u8() % 8;
        for (int e = 0; e < edits; ++e) {
            const std::size_t pos = r.u16() % v.s.size();
            v.s[pos] = static_cast<char>(v.s[pos] ^ r.u8());
        }
        if (r.u8() & 1) v.s = gf_fuzz::fix_blob(v.s);
        break;
    }
    case v_register:
        if (g.have_reg) v.type = SQLITE_BLOB, v.s = g.reg;
        break;
    case v_options: {
        v.type = SQLITE_TEXT;
        const int count = r.u8() % 4;
        for (int k = 0; k < count; ++k)
            v.s += std::string(k ? "; " : "") + option_items[r.u8() % option_item_count];
        break;
    }
    case v_weights: v.type = SQLITE_TEXT, v.s = weight_texts[r.u8() % weight_text_count]; break;
    case v_table_cell: {
        const auto& row = g.t_rows[r.u8() % g.t_rows.size()];
        v = row[r.u8() % row.size()];
        break;
    }
    case v_zeroblob: v.type = 0, v.zero = r.u16(); break;
    }
    return v;
}

std::string placeholders(int n) {
    std::string s;
    for (int k = 0; k < n; ++k) s += k ? ", ?" : "?";
    return s;
}

void call_agg_values(reader& r) {
    const char* fn = aggregates[r.u8() % aggregate_count];
    int nargs = r.u8();
    nargs = nargs & 0x80 ? 30 + (nargs & 0x7f) % 100 : nargs % 9;  // many: covariate limits
    const int nrows = r.u8() % 13;
    const int mods = r.u8();
    std::string args;
    if ((mods & 8) && nargs > 0) args = "DISTINCT ";
    for (int k = 0; k < nargs; ++k) args += (k ? ", column" : "column") + std::to_string(k + 1);
    std::string sql = std::string("SELECT ") + fn + "(" + args + ")" + ((mods & 2) ? " OVER ()" : "") +
                      " FROM (VALUES ";
    std::vector<val> binds;
    for (int row = 0; row < std::max(nrows, 1); ++row) {
        sql += row ? ", (" : "(";
        sql += nargs ? placeholders(nargs) : "NULL";
        sql += ")";
        if (row < nrows || nargs == 0)
            for (int k = 0; k < nargs; ++k) binds.push_back(read_value(r));
    }
    sql += ")";
    if (nrows == 0) sql += " WHERE 0";
    if ((mods & 1) && nargs > 0) sql += " GROUP BY column1";
    // Rows of a missing row count bind NULL (fewer binds than parameters).
    run(sql, binds, true);
}

void call_agg_table(reader& r) {
    const char* fn = aggregates[r.u8() % aggregate_count];
    const int nargs = r.u8() % 8;
    std::string args;
    std::vector<val> binds;
    for (int k = 0; k < nargs; ++k) {
        const int c = r.u8();
        args += k ? ", " : "";
        if (c < 0xC0) {
            args += table_columns[c % table_column_count];
        } else {
            args += "?";
            binds.push_back(read_value(r));
        }
    }
    const int mods = r.u8();
    std::string sql = std::string("SELECT ") + fn + "(" + args + ") FROM t";
    if (mods & 4) sql += " WHERE rowid % 3 != 1";
    if ((mods & 3) == 1) sql += " GROUP BY g";
    else if ((mods & 3) == 2) sql += " GROUP BY s";
    else if ((mods & 3) == 3) sql += " GROUP BY g, s";
    run(sql, binds, true);
}

/// Hidden argument columns of a report, in order.
std::vector<const char*> hidden_of(const char* report) {
    if (std::strcmp(report, "groupfit_contrast") == 0) return {"model", "weights", "options"};
    return {"model", "options"};
}

void call_tvf(reader& r) {
    const char* name = reports[r.u8() % report_count];
    const int nargs = r.u8() % 5;
    const int style = r.u8() % 4;
    const auto hidden = hidden_of(name);
    std::vector<val> binds;
    for (int k = 0; k < nargs; ++k) binds.push_back(read_value(r));
    std::string sql;
    switch (style) {
    case 0: sql = std::string("SELECT * FROM ") + name + "(" + placeholders(nargs) + ")"; break;
    case 1: {  // hidden columns as constraints, and selected back
        sql = "SELECT *";
        for (const char* h : hidden) sql += std::string(", ") + h;
        sql += std::string(" FROM ") + name;
        const int bound = std::min<int>(nargs, static_cast<int>(hidden.size()));
        for (int k = 0; k < bound; ++k) sql += std::string(k ? " AND " : " WHERE ") + hidden[k] + " = ?";
        break;
    }
    case 2:
        sql = std::string("SELECT * FROM ") + name + "(" + placeholders(nargs) +
              ") WHERE rowid > 1 ORDER BY 2 DESC LIMIT 5";
        break;
    default: {  // several models through IN: xFilter runs once per value
        sql = std::string("SELECT *, model FROM ") + name + " WHERE model IN (" +
              placeholders(std::max(nargs, 1)) + ")";
        if (nargs == 0) binds.push_back(val{});
        break;
    }
    }
    run(sql, binds, false);
}

void call_limit(reader& r) {
    const int nargs = r.u8() % 4;
    std::vector<val> binds;
    for (int k = 0; k < nargs; ++k) binds.push_back(read_value(r));
    run("SELECT groupfit_limit(" + placeholders(nargs) + ")", binds, false);
}

void call_tvf_lateral(reader& r) {
    const char* name = reports[r.u8() % report_count];
    const int style = r.u8() % 3;
    const int nextra = r.u8() % 3;
    std::vector<val> binds;
    for (int k = 0; k < nextra; ++k) binds.push_back(read_value(r));
    std::string extra;
    for (int k = 0; k < nextra; ++k) extra += ", ?";
    std::string sql;
    switch (style) {
    case 0: sql = std::string("SELECT r.* FROM models m, ") + name + "(m.m" + extra + ") r"; break;
    case 1:
        sql = std::string("SELECT m.id, (SELECT count(*) FROM ") + name + "(m.m" + extra +
              ")) FROM models m";
        break;
    default: {
        const auto hidden = hidden_of(name);
        sql = std::string("SELECT r.* FROM models m JOIN ") + name + " r ON r.model = m.m";
        for (int k = 0; k < nextra && k + 1 < static_cast<int>(hidden.size()); ++k)
            sql += std::string(" AND r.") + hidden[k + 1] + " = ?";
        binds.resize(std::min<std::size_t>(binds.size(), hidden.size() - 1));
        break;
    }
    }
    run(sql, binds, false);
}

void call_merge_models(reader& r) {
    const int mods = r.u8();
    std::vector<val> binds;
    for (int k = 0; k < 4; ++k) binds.push_back(read_value(r));
    std::string sql =
        "SELECT groupfit_merge(x) FROM (SELECT m AS x FROM models WHERE (id % 7) IN (?, ?)"
        " UNION ALL SELECT ? UNION ALL SELECT ?)";
    if (mods & 1) sql += " GROUP BY typeof(x)";
    run(sql, binds, true);
}

void exec_or_die(const char* sql) {
    char* err = nullptr;
    if (sqlite3_exec(g.db, sql, nullptr, nullptr, &err) != SQLITE_OK)
        gf_fuzz::finding(std::string("set-up failed: ") + sql + ": " + (err ? err : "?"));
    sqlite3_free(err);
}

void set_up() {
    if (sqlite3_auto_extension(reinterpret_cast<void (*)()>(sqlite3_groupfit_init)) != SQLITE_OK ||
        sqlite3_open(":memory:", &g.db) != SQLITE_OK)
        gf_fuzz::finding("cannot open SQLite with the extension");
    exec_or_die("CREATE TABLE t(g, s, r, b, y, x1, x2, w, n)");
    // Twelve deterministic rows: unbalanced integer, text, real and blob
    // levels; covariates; weights with one zero; a column n of mixed types.
    gf_fuzz::lcg rnd{7};
    const int gs[] = {1, 1, 1, 2, 2, 2, 2, 4, 4, 8, 8, 8};
    const char* ss[] = {"a", "b", "c", "d"};
    sqlite3_stmt* ins = nullptr;
    sqlite3_prepare_v2(g.db, "INSERT INTO t VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)", -1, &ins, nullptr);
    for (int i = 0; i < 12; ++i) {
        std::vector<val> row(table_column_count);
        row[0].type = SQLITE_INTEGER, row[0].i = gs[i];
        row[1].type = SQLITE_TEXT, row[1].s = ss[(i * 7) % 4];
        row[2].type = SQLITE_FLOAT, row[2].d = 0.5 + i % 3;
        row[3].type = SQLITE_BLOB, row[3].s = std::string(1, static_cast<char>(1 + i % 3));
        row[5].type = SQLITE_FLOAT, row[5].d = 10.0 + 5.0 * rnd.next();
        row[6].type = SQLITE_FLOAT, row[6].d = rnd.next() - 0.5;
        row[4].type = SQLITE_FLOAT, row[4].d = 2.0 + 0.3 * gs[i] + 0.5 * row[5].d + rnd.next();
        row[7].type = SQLITE_FLOAT, row[7].d = i == 5 ? 0.0 : 0.5 + rnd.next();
        if (i % 4 == 1) row[8].type = SQLITE_TEXT, row[8].s = " 3.5 ";
        else if (i % 4 == 2) row[8].type = SQLITE_INTEGER, row[8].i = i;
        for (std::size_t c = 0; c < row.size(); ++c) bind(ins, static_cast<int>(c) + 1, row[c]);
        if (sqlite3_step(ins) != SQLITE_DONE) gf_fuzz::finding("set-up insert failed");
        sqlite3_reset(ins);
        g.t_rows.push_back(std::move(row));
    }
    sqlite3_finalize(ins);
    exec_or_die(
        "CREATE TABLE models(id INTEGER PRIMARY KEY, m BLOB);"
        "INSERT INTO models(m) SELECT groupfit(y, g) FROM t;"
        "INSERT INTO models(m) SELECT groupfit(y, s, x1, x2) FROM t;"
        "INSERT INTO models(m) SELECT groupfit_weighted(w, y, s, x1) FROM t;"
        "INSERT INTO models(m) SELECT groupfit(y, r) FROM t;"
        "INSERT INTO models(m) SELECT groupfit(y, b, x1) FROM t;"
        "INSERT INTO models(m) SELECT groupfit(y, g, x1, 2 * x1 + 1) FROM t;"
        "INSERT INTO models(m) SELECT groupfit(y, g) FROM t WHERE rowid = 1;"
        "INSERT INTO models(m) SELECT groupfit(n, g, x1) FROM t;"
        "INSERT INTO models(m) SELECT groupfit(y, s) FROM t WHERE s IN ('a', 'b');"
        "INSERT INTO models(m) SELECT groupfit(NULL, g) FROM t;");
    sqlite3_stmt* st = nullptr;
    sqlite3_prepare_v2(g.db, "SELECT m FROM models ORDER BY id", -1, &st, nullptr);
    while (sqlite3_step(st) == SQLITE_ROW) {
        if (sqlite3_column_type(st, 0) != SQLITE_BLOB) gf_fuzz::finding("set-up: a model is not a BLOB");
        g.models.emplace_back(static_cast<const char*>(sqlite3_column_blob(st, 0)),
                              sqlite3_column_bytes(st, 0));
    }
    sqlite3_finalize(st);
    if (g.models.size() != 10) gf_fuzz::finding("set-up: expected 10 models");
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
    if (!g.db) set_up();
    // Per-input state: default limits, empty register.
    exec_or_die("SELECT groupfit_limit('levels', 50000), groupfit_limit('covariates', 32)");
    g.reg.clear();
    g.have_reg = false;
    reader r{data, size};
    for (int call = 0; call < max_calls && !r.empty(); ++call) {
        switch (r.u8() % form_count) {
        case f_agg_values: call_agg_values(r); break;
        case f_agg_table: call_agg_table(r); break;
        case f_tvf: call_tvf(r); break;
        case f_limit: call_limit(r); break;
        case f_tvf_lateral: call_tvf_lateral(r); break;
        case f_merge_models: call_merge_models(r); break;
        }
    }
    return 0;
}
