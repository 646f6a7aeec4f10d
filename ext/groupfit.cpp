/*
** groupfit: group comparisons (one-factor linear models with covariates)
** inside SQLite.
**
**   .load ./build/release/groupfit
**   CREATE TABLE m AS
**     SELECT groupfit(minutes, carrier, distance_km, weight_kg) AS model
**     FROM deliveries;
**   SELECT * FROM groupfit_coef((SELECT model FROM m),
**                               'coding=effect; names=carrier, distance_km, weight_kg');
**   SELECT * FROM groupfit_tests((SELECT model FROM m));
**   -- one model per segment, joined like any other rows
**   SELECT region, c.label, c.estimate, c.p_value
**     FROM (SELECT depot_id, groupfit(minutes, carrier) AS model
**             FROM deliveries GROUP BY depot_id) AS s
**     JOIN depots USING (depot_id), groupfit_coef(s.model) AS c;
**
** Aggregates (return a model BLOB):
**   groupfit(y, grp [, x1, ...])            response, grouping, covariates
**   groupfit_weighted(w, y, grp [, x1, ...]) analytic weights (w = 0 skipped)
**   groupfit_merge(model)                   union of models of one shape
** Table-valued functions (hidden arguments model, options):
**   groupfit_coef, groupfit_levels, groupfit_deviations, groupfit_tests,
**   groupfit_summary, groupfit_pairs (model, options),
**   groupfit_contrast (model, weights, options)
** Scalar:
**   groupfit_limit(name [, value])          read or set a per-connection limit
**                                           ('levels', 'covariates')
**
** How it works: the aggregate keeps, per level, a square-root-free Givens
** factor of that level's shifted rows (core/summary.hpp); the BLOB is that
** summary, versioned and checksummed. Each table-valued function decodes the
** BLOB, fits the model (core/fit.hpp) under the options given and returns the
** rows of one report (core/report.hpp). This file is only the SQLite glue:
** argument checks, type conversion, registration, and turning C++ exceptions
** into SQLite errors. No exception crosses into SQLite.
*/
#include <sqlite3ext.h>
SQLITE_EXTENSION_INIT1

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdlib>
#include <cstring>
#include <functional>
#include <limits>
#include <memory>
#include <new>
#include <string>
#include <vector>

#include "compare.hpp"
#include "error.hpp"
#include "factorial.hpp"
#include "fit.hpp"
#include "options.hpp"
#include "report.hpp"
#include "summary.hpp"

namespace {

using groupfit::summary;

/* Per-connection settings, shared by every function registered on one
** connection and freed when the last of them is destroyed. */
struct connection_config {
    groupfit::limits lim;
    int refs = 0;
};

void release_config(void* p) noexcept {
    auto* c = static_cast<connection_config*>(p);
    if (--c->refs == 0) delete c;
}

connection_config* config_of(sqlite3_context* ctx) {
    return static_cast<connection_config*>(sqlite3_user_data(ctx));
}

/* Out-of-memory policy (DESIGN.md section 5). No C++ exception leaves a
** callback: every SQLite callback below is noexcept (an exception that still
** escaped would terminate, not unwind through SQLite's C frames) and runs its
** work inside a handler. std::bad_alloc becomes SQLITE_NOMEM. Error messages
** are formatted with sqlite3_mprintf, not std::string, so reporting an error
** never throws; when even that allocation fails the error becomes SQLITE_NOMEM.
** Every SQLite call that can run out of memory is checked: sqlite3_value_text,
** sqlite3_value_blob (through text_of and blob_of), sqlite3_value_dup,
** sqlite3_mprintf. The sqlite3_result_text64/blob64 calls need no check:
** they set SQLITE_NOMEM on the context themselves when they cannot copy. */

/* Sets an error result "<fn>: <prefix><what>" on ctx, or SQLITE_NOMEM when the
** message cannot be allocated. */
void result_error(sqlite3_context* ctx, const char* fn, const char* prefix, const char* what) noexcept {
    char* msg = sqlite3_mprintf("%s: %s%s", fn, prefix, what);
    if (!msg) return sqlite3_result_error_nomem(ctx);
    sqlite3_result_error(ctx, msg, -1);
    sqlite3_free(msg);
}

/* Runs `body`, mapping exceptions to an SQL error on ctx that names `fn`. */
template <class F>
void guarded(sqlite3_context* ctx, const char* fn, F&& body) noexcept {
    try {
        body();
    } catch (const std::bad_alloc&) {
        sqlite3_result_error_nomem(ctx);
    } catch (const groupfit::error& e) {
        result_error(ctx, fn, "", e.what());
    } catch (const std::exception& e) {
        result_error(ctx, fn, "internal error: ", e.what());
    } catch (...) {
        result_error(ctx, fn, "internal error: ", "unknown exception");
    }
}

/* The text of a value that is not NULL. sqlite3_value_text returns NULL for
** such a value only when converting or terminating it ran out of memory. */
std::string_view text_of(sqlite3_value* v) {
    const auto* t = reinterpret_cast<const char*>(sqlite3_value_text(v));
    if (!t) throw std::bad_alloc();
    return {t, static_cast<std::size_t>(sqlite3_value_bytes(v))};
}

/* The bytes of a value that is not NULL. sqlite3_value_blob returns NULL for an
** empty value, and also when it runs out of memory (expanding a zeroblob or
** converting a number): then the value still has bytes, or SQLite has set it
** to NULL. */
std::string_view blob_of(sqlite3_value* v) {
    const void* b = sqlite3_value_blob(v);
    const int n = sqlite3_value_bytes(v);
    if (!b) {
        if (n > 0 || sqlite3_value_type(v) == SQLITE_NULL) throw std::bad_alloc();
        return {};
    }
    return {static_cast<const char*>(b), static_cast<std::size_t>(n)};
}

const char* type_name(int t) {
    switch (t) {
    case SQLITE_INTEGER: return "an integer";
    case SQLITE_FLOAT: return "a real";
    case SQLITE_TEXT: return "text";
    case SQLITE_BLOB: return "a blob";
    default: return "NULL";
    }
}

/* Names an argument in messages: "response (argument 1)",
** "covariate 2 (argument 4)". Built only when there is an error to report. */
std::string arg_name(const char* role, int covariate, int position) {
    std::string s = role;
    if (covariate > 0) s += " " + std::to_string(covariate);
    return s + " (argument " + std::to_string(position) + ")";
}

/* A numeric argument: false for NULL; throws for anything that is not a finite
** number (text is accepted only when the whole text is a number). */
[[gnu::cold]] bool numeric_slow(sqlite3_value* v, const char* role, int covariate, int position,
                                double& out) {
    const std::string what = arg_name(role, covariate, position);
    switch (sqlite3_value_type(v)) {
    case SQLITE_FLOAT: {
        const double x = sqlite3_value_double(v);
        throw groupfit::error(what + " must be a finite number, got " +
                              (std::isnan(x) ? std::string("NaN") : x > 0 ? "Inf" : "-Inf"));
    }
    case SQLITE_TEXT: {
        const std::string_view t = text_of(v);
        if (groupfit::parse_real(t, out)) return true;
        // Quote at most 40 bytes, cut at a UTF-8 character boundary.
        std::size_t cut = std::min<std::size_t>(t.size(), 40);
        while (cut < t.size() && cut > 0 && (static_cast<unsigned char>(t[cut]) & 0xC0) == 0x80) --cut;
        throw groupfit::error(what + " must be a number, got text '" + std::string(t.substr(0, cut)) +
                              (cut < t.size() ? "...'" : "'"));
    }
    default: throw groupfit::error(what + " must be a number, got a blob");
    }
}

inline bool numeric_arg(sqlite3_value* v, const char* role, int covariate, int position,
                        double& out) {
    switch (sqlite3_value_type(v)) {
    case SQLITE_NULL: return false;
    case SQLITE_INTEGER: out = static_cast<double>(sqlite3_value_int64(v)); return true;
    case SQLITE_FLOAT:
        out = sqlite3_value_double(v);
        if (std::isfinite(out)) return true;
        [[fallthrough]];
    default: return numeric_slow(v, role, covariate, position, out);
    }
}

/* ---------------------------------------------------------------- aggregates */

/* The aggregate context (zeroed by SQLite). After any exception in xStep the
** summary may be half-updated (e.g. a level added but not its factor), so it is
** marked failed: SQLite aborts the statement and still calls xFinal, which then
** only frees it. */
struct agg_state {
    summary* s;
    const groupfit::limits* lim;  // the connection's (groupfit and groupfit_weighted)
    groupfit::row_batch* batch;  // rows not yet added (models with many levels)
    bool failed;
};

/* The aggregate's hook for new cells: every cell must have the factors of
** cell 0 (plain, or crossed with the same arity). */
void check_new_cell(void*, const summary& s, std::size_t cell) {
    if (cell > 0) groupfit::check_same_factors(s, cell);
}

/* Runs one xStep body; an exception marks the aggregate failed. */
template <class F>
void guarded_step(sqlite3_context* ctx, const char* fn, F&& body) noexcept {
    agg_state* st = nullptr;
    guarded(ctx, fn, [&] {
        try {
            st = static_cast<agg_state*>(sqlite3_aggregate_context(ctx, sizeof(agg_state)));
            if (!st) throw std::bad_alloc();
            if (st->failed) return;  // not reached: SQLite stops at the first error
            body(*st);
        } catch (...) {
            if (st) st->failed = true;
            throw;
        }
    });
}

void fit_step(sqlite3_context* ctx, int argc, sqlite3_value** argv, bool weighted) noexcept {
    const char* fn = weighted ? "groupfit_weighted" : "groupfit";
    guarded_step(ctx, fn, [&](agg_state& st) {
        const int lead = weighted ? 3 : 2;
        if (argc < lead && weighted)
            throw groupfit::error("needs at least (weight, response, grouping)");
        if (argc < lead) throw groupfit::error("needs at least (response, grouping)");
        const int p = argc - lead;
        if (!st.s) {
            // The connection's limits as the aggregate starts (kept for its rows).
            const auto& l = config_of(ctx)->lim;
            if (p > l.max_covariates)
                throw groupfit::error("too many covariates: " + std::to_string(p) +
                                      " given, the limit is " + std::to_string(l.max_covariates));
            st.lim = &l;
            st.s = new summary(p, weighted);
        }
        summary& s = *st.s;
        const auto& lim = *st.lim;
        if (s.covariates() != p)
            throw groupfit::error("the number of covariates changed between rows");

        double vals[130];
        bool null_x = false, null_y, null_w = false;
        double w = 1.0;
        if (weighted) {
            null_w = !numeric_arg(argv[0], "weight", 0, 1, w);
            if (!null_w && w < 0)
                throw groupfit::error("weight (argument 1) must be >= 0, got " +
                                      groupfit::shortest_real(w));
        }
        null_y = !numeric_arg(argv[lead - 2], "response", 0, lead - 1, vals[p]);
        for (int j = 0; j < p; ++j)
            if (!numeric_arg(argv[lead + j], "covariate", j + 1, lead + j + 1, vals[j])) null_x = true;
        sqlite3_value* g = argv[lead - 1];
        const int gtype = sqlite3_value_type(g);
        // Any value is a level, but a number must be finite (the model format
        // stores finite numbers only); an error even in a row dropped for a NULL.
        if (gtype == SQLITE_FLOAT && !std::isfinite(sqlite3_value_double(g))) [[unlikely]]
            throw groupfit::error(arg_name("grouping", 0, lead) +
                                  " must be finite when it is a number, got " +
                                  (sqlite3_value_double(g) > 0 ? "Inf" : "-Inf"));
        if (null_w) return s.drop(groupfit::drop_reason::null_weight);
        if (null_y) return s.drop(groupfit::drop_reason::null_response);
        if (gtype == SQLITE_NULL) return s.drop(groupfit::drop_reason::null_group);
        if (null_x) return s.drop(groupfit::drop_reason::null_covariate);
        if (w == 0.0) return s.drop(groupfit::drop_reason::zero_weight);
        groupfit::level_kind kind;
        const void* data;
        std::size_t len;
        sqlite3_int64 i;
        double r;
        if (gtype == SQLITE_INTEGER) {
            i = sqlite3_value_int64(g);
            kind = groupfit::level_kind::integer, data = &i, len = sizeof i;
        } else if (gtype == SQLITE_FLOAT) {
            r = sqlite3_value_double(g);
            kind = groupfit::level_kind::real, data = &r, len = sizeof r;
        } else {
            const std::string_view t = gtype == SQLITE_TEXT ? text_of(g) : blob_of(g);
            kind = gtype == SQLITE_TEXT ? groupfit::level_kind::text : groupfit::level_kind::blob;
            data = t.empty() ? "" : t.data(), len = t.size();
        }
        // With many levels the rows go through a batch (summary::add_batch),
        // which overlaps their memory waits; the result is the same.
        if (st.batch || s.wants_batches()) {
            if (!st.batch) st.batch = new groupfit::row_batch(p);
            st.batch->push(kind, data, len, vals, w);
            if (st.batch->full()) s.add_batch(*st.batch, lim, check_new_cell);
            return;
        }
        const std::size_t cells_before = s.cells();
        const std::size_t cell = s.cell_for(kind, data, len, lim);
        if (s.cells() != cells_before) check_new_cell(nullptr, s, cell);
        s.add_row(cell, vals, w);
    });
}

void groupfit_step(sqlite3_context* ctx, int argc, sqlite3_value** argv) noexcept {
    fit_step(ctx, argc, argv, false);
}
void groupfit_weighted_step(sqlite3_context* ctx, int argc, sqlite3_value** argv) noexcept {
    fit_step(ctx, argc, argv, true);
}

void merge_step(sqlite3_context* ctx, int, sqlite3_value** argv) noexcept {
    guarded_step(ctx, "groupfit_merge", [&](agg_state& st) {
        sqlite3_value* v = argv[0];
        if (sqlite3_value_type(v) == SQLITE_NULL) return;
        if (sqlite3_value_type(v) != SQLITE_BLOB)
            throw groupfit::error(std::string("model must be a BLOB made by groupfit(), got ") +
                                  type_name(sqlite3_value_type(v)));
        const auto& lim = config_of(ctx)->lim;
        const std::string_view blob = blob_of(v);
        if (!st.s) st.s = new summary(summary::deserialize(blob, lim));
        else st.s->merge_blob(blob, lim);  // no intermediate summary per row
    });
}

/* Shared xFinal: the model BLOB, or NULL when no row (or model) was seen.
** After a failed xStep SQLite calls it only to clean up: the summary is freed
** and nothing is computed. */
void model_final(sqlite3_context* ctx, const char* fn) noexcept {
    auto* st = static_cast<agg_state*>(sqlite3_aggregate_context(ctx, 0));
    std::unique_ptr<summary> s(st ? st->s : nullptr);
    std::unique_ptr<groupfit::row_batch> batch(st ? st->batch : nullptr);
    if (st) st->s = nullptr, st->batch = nullptr;
    if (st && st->failed) return;
    if (!s) return sqlite3_result_null(ctx);
    guarded(ctx, fn, [&] {
        if (batch && !batch->empty()) s->add_batch(*batch, *st->lim, check_new_cell);
        batch.reset();
        // Written straight into SQLite's buffer, which SQLite then owns; the
        // summary is freed first, so memory never holds it and two BLOBs.
        const std::size_t n = s->serialized_size();
        auto* buf = static_cast<unsigned char*>(sqlite3_malloc64(n));
        if (!buf) throw std::bad_alloc();
        try {
            s->serialize_to(buf);
        } catch (...) {
            sqlite3_free(buf);
            throw;
        }
        s.reset();
        sqlite3_result_blob64(ctx, buf, n, sqlite3_free);
    });
}
void groupfit_final(sqlite3_context* ctx) noexcept { model_final(ctx, "groupfit"); }
void groupfit_weighted_final(sqlite3_context* ctx) noexcept { model_final(ctx, "groupfit_weighted"); }
void merge_final(sqlite3_context* ctx) noexcept { model_final(ctx, "groupfit_merge"); }

/* ---------------------------------------------------------------- scalars */

void limit_func(sqlite3_context* ctx, int argc, sqlite3_value** argv) noexcept {
    guarded(ctx, "groupfit_limit", [&] {
        auto& lim = config_of(ctx)->lim;
        // Up to the first NUL, like every option text.
        const std::string n = sqlite3_value_type(argv[0]) == SQLITE_NULL ? "" : text_of(argv[0]).data();
        sqlite3_int64 old;
        if (n == "levels") old = static_cast<sqlite3_int64>(lim.max_levels);
        else if (n == "covariates") old = lim.max_covariates;
        else throw groupfit::error("name must be one of levels, covariates (not '" + n + "')");
        if (argc == 2) {
            if (sqlite3_value_type(argv[1]) != SQLITE_INTEGER)
                throw groupfit::error("value must be an integer");
            const sqlite3_int64 v = sqlite3_value_int64(argv[1]);
            if (n == "levels") {
                if (v < 1 || v > 10000000)
                    throw groupfit::error("levels must be between 1 and 10000000");
                lim.max_levels = static_cast<std::size_t>(v);
            } else {
                if (v < 0 || v > 120) throw groupfit::error("covariates must be between 0 and 120");
                lim.max_covariates = static_cast<int>(v);
            }
        }
        sqlite3_result_int64(ctx, old);
    });
}

/* ------------------------------------------------- table-valued functions
** One eponymous virtual table per report. Every table has the report's
** columns followed by two HIDDEN argument columns, model and options. */

struct report_kind {
    const char* name;
    const std::vector<std::string>& (*columns)();
    groupfit::table (*make)(const summary&, const groupfit::options&, std::string_view weights);
    bool takes_weights;  // hidden arguments: model, [weights,] options
};

/* Crossed cells (groupfit_cross), or slopes that vary by level, go to the
** general model of core/factorial.hpp; a one-factor model with common slopes
** to the double-double fit of core/fit.hpp. */
bool general_model(const summary& s, const groupfit::options& o) {
    return groupfit::crossed_factors(s) > 0 || o.slopes != groupfit::slopes_kind::common || o.has_terms;
}

groupfit::table make_coef(const summary& s, const groupfit::options& o, std::string_view) {
    if (general_model(s, o)) return groupfit::cross_coef_report(s, o);
    return groupfit::coef_report(groupfit::fit(s, o));
}
groupfit::table make_levels(const summary& s, const groupfit::options& o, std::string_view) {
    if (general_model(s, o)) return groupfit::cross_levels_report(s, o);
    return groupfit::levels_report(groupfit::fit(s, o));
}
groupfit::table make_deviations(const summary& s, const groupfit::options& o, std::string_view) {
    if (general_model(s, o)) return groupfit::cross_deviations_report(s, o);
    return groupfit::deviations_report(groupfit::fit(s, o));
}
groupfit::table make_tests(const summary& s, const groupfit::options& o, std::string_view) {
    if (general_model(s, o)) return groupfit::cross_tests_report(s, o);
    return groupfit::tests_report(groupfit::fit(s, o));
}
groupfit::table make_summary(const summary& s, const groupfit::options& o, std::string_view) {
    if (general_model(s, o)) return groupfit::cross_summary_report(s, o);
    return groupfit::summary_report(groupfit::fit(s, o), s);
}
groupfit::table make_pairs(const summary& s, const groupfit::options& o, std::string_view) {
    if (general_model(s, o)) return groupfit::cross_pairs_report(s, o);
    if (o.has_by) throw groupfit::error("options: by= needs crossed factors (groupfit_cross)");
    if (o.has_factor) throw groupfit::error("options: factor= needs crossed factors (groupfit_cross)");
    return groupfit::pairs_report(groupfit::fit(s, o));
}
groupfit::table make_contrast(const summary& s, const groupfit::options& o, std::string_view w) {
    if (general_model(s, o)) return groupfit::cross_contrast_report(s, o, w);
    if (o.has_factor) throw groupfit::error("options: factor= needs crossed factors (groupfit_cross)");
    return groupfit::contrast_report(groupfit::fit(s, o), w);
}

const report_kind reports[] = {
    {"groupfit_coef", groupfit::coef_columns, make_coef, false},
    {"groupfit_levels", groupfit::levels_columns, make_levels, false},
    {"groupfit_deviations", groupfit::deviations_columns, make_deviations, false},
    {"groupfit_tests", groupfit::tests_columns, make_tests, false},
    {"groupfit_summary", groupfit::summary_columns, make_summary, false},
    {"groupfit_pairs", groupfit::pairs_columns, make_pairs, false},
    {"groupfit_contrast", groupfit::contrast_columns, make_contrast, true},
};

struct report_module_aux {
    const report_kind* kind;
    connection_config* config;
};

struct report_vtab {
    sqlite3_vtab base;
    const report_kind* kind;
    connection_config* config;
    int ncol;   // report columns; the hidden arguments follow from column ncol
    int nargs;  // 2 (model, options) or 3 (model, weights, options)
};

struct report_cursor {
    sqlite3_vtab_cursor base;
    groupfit::table result;
    std::size_t row = 0;
    sqlite3_value* args[3] = {nullptr, nullptr, nullptr};
};

/* idxNum: bit a is set when hidden argument a (0 = model, then weights for
** groupfit_contrast, then options) is bound; bound arguments arrive in argv in
** that order. */

/* Sets the message of an error returned by a virtual-table method. Returns the
** code to return: SQLITE_ERROR, or SQLITE_NOMEM when the message cannot be
** allocated. */
int vtab_error(sqlite3_vtab* vt, const char* fn, const char* what) noexcept {
    sqlite3_free(vt->zErrMsg);
    vt->zErrMsg = sqlite3_mprintf("%s: %s", fn, what);
    return vt->zErrMsg ? SQLITE_ERROR : SQLITE_NOMEM;
}
int set_vtab_error(sqlite3_vtab* vt, const std::string& msg) noexcept {
    sqlite3_free(vt->zErrMsg);
    vt->zErrMsg = sqlite3_mprintf("%s", msg.c_str());
    return vt->zErrMsg ? SQLITE_ERROR : SQLITE_NOMEM;
}

/* The result code of an exception caught in a virtual-table method (which
** must be called from a catch block): SQLITE_NOMEM for std::bad_alloc, else
** SQLITE_ERROR with the message "<function>: <what>" set on vt. */
int vtab_exception(sqlite3_vtab* vt, const char* fn) noexcept {
    try {
        throw;
    } catch (const std::bad_alloc&) {
        return SQLITE_NOMEM;
    } catch (const groupfit::error& e) {
        return vtab_error(vt, fn, e.what());
    } catch (const std::exception& e) {
        char* what = sqlite3_mprintf("internal error: %s", e.what());
        if (!what) return SQLITE_NOMEM;
        const int rc = vtab_error(vt, fn, what);
        sqlite3_free(what);
        return rc;
    } catch (...) {
        return vtab_error(vt, fn, "internal error: unknown exception");
    }
}

int report_connect(sqlite3* db, void* aux, int, const char* const*, sqlite3_vtab** out, char** err) noexcept {
    auto* a = static_cast<report_module_aux*>(aux);
    *out = nullptr;
    (void)err;  // the only failures are SQLite's own (its error state is set) and NOMEM
    try {
        std::string schema = "CREATE TABLE x(";
        for (const auto& c : a->kind->columns()) schema += c + ",";
        schema += a->kind->takes_weights ? "model HIDDEN, weights HIDDEN, options HIDDEN)"
                                         : "model HIDDEN, options HIDDEN)";
        const int rc = sqlite3_declare_vtab(db, schema.c_str());
        if (rc != SQLITE_OK) return rc;
        auto* vt = static_cast<report_vtab*>(sqlite3_malloc(sizeof(report_vtab)));
        if (!vt) return SQLITE_NOMEM;
        std::memset(vt, 0, sizeof *vt);
        vt->kind = a->kind;
        vt->config = a->config;
        vt->ncol = static_cast<int>(a->kind->columns().size());
        vt->nargs = a->kind->takes_weights ? 3 : 2;
        sqlite3_vtab_config(db, SQLITE_VTAB_INNOCUOUS);
        *out = &vt->base;
        return SQLITE_OK;
    } catch (const std::bad_alloc&) {
        return SQLITE_NOMEM;
    } catch (...) {
        return SQLITE_ERROR;  // not reached: building the schema throws nothing else
    }
}

int report_disconnect(sqlite3_vtab* vt) noexcept {
    sqlite3_free(vt->zErrMsg);
    sqlite3_free(vt);
    return SQLITE_OK;
}

constexpr int missing_shift = 8;  // idxNum bits above the argument mask: missing argument + 1

int report_best_index(sqlite3_vtab* tab, sqlite3_index_info* info) noexcept {
    auto* vt = reinterpret_cast<report_vtab*>(tab);
    int where[3] = {-1, -1, -1};
    bool seen_unusable[3] = {false, false, false};
    for (int i = 0; i < info->nConstraint; ++i) {
        const auto& c = info->aConstraint[i];
        const int arg = c.iColumn - vt->ncol;
        if (arg < 0 || arg >= vt->nargs || c.op != SQLITE_INDEX_CONSTRAINT_EQ) continue;
        if (!c.usable) seen_unusable[arg] = true;
        else where[arg] = i;
    }
    for (int a = 0; a < vt->nargs; ++a)
        if (where[a] < 0 && seen_unusable[a]) return SQLITE_CONSTRAINT;  // try another plan
    // A plan without the model (or weights) is possible but never wanted: the
    // planner also asks about each branch of an OR on the report's columns
    // alone. Such a plan gets a prohibitive cost and fails in xFilter if it is
    // ever chosen (the argument really is missing then).
    const int required = vt->nargs == 3 ? 2 : 1;  // model, and weights when taken
    int missing = -1;
    for (int a = 0; a < required; ++a)
        if (where[a] < 0 && missing < 0) missing = a;
    int argv_index = 1, idx = 0;
    for (int a = 0; a < vt->nargs; ++a) {
        if (where[a] < 0) continue;
        info->aConstraintUsage[where[a]].argvIndex = argv_index++;
        info->aConstraintUsage[where[a]].omit = 1;
        idx |= 1 << a;
    }
    info->idxNum = idx;
    info->estimatedCost = 10.0;
    info->estimatedRows = 10;
    if (missing >= 0) {
        info->idxNum |= (missing + 1) << missing_shift;
        info->estimatedCost = 1e300;
        info->estimatedRows = std::numeric_limits<sqlite3_int64>::max() / 2;
    }
    return SQLITE_OK;
}

int report_open(sqlite3_vtab*, sqlite3_vtab_cursor** out) noexcept {
    auto* cur = new (std::nothrow) report_cursor();
    if (!cur) return SQLITE_NOMEM;
    *out = &cur->base;
    return SQLITE_OK;
}

void clear_args(report_cursor* cur) noexcept {
    for (auto& a : cur->args) {
        sqlite3_value_free(a);
        a = nullptr;
    }
}

int report_close(sqlite3_vtab_cursor* c) noexcept {
    auto* cur = reinterpret_cast<report_cursor*>(c);
    clear_args(cur);
    delete cur;
    return SQLITE_OK;
}

/* On any failure the cursor is left empty (at EOF, no arguments kept). */
int report_filter(sqlite3_vtab_cursor* c, int idx, const char*, int argc, sqlite3_value** argv) noexcept {
    auto* cur = reinterpret_cast<report_cursor*>(c);
    auto* vt = reinterpret_cast<report_vtab*>(c->pVtab);
    cur->result = groupfit::table{};
    cur->row = 0;
    clear_args(cur);
    if (const int missing = (idx >> missing_shift) - 1; missing >= 0) {
        sqlite3_vtab* tab = c->pVtab;
        try {
            return set_vtab_error(tab, std::string(vt->kind->name) + ": the " +
                                           (missing == 0 ? "model" : "weights") + " argument is missing");
        } catch (...) {
            return vtab_exception(tab, vt->kind->name);
        }
    }
    try {
        // The bound arguments, kept for the hidden columns (xColumn).
        sqlite3_value* bound[3] = {nullptr, nullptr, nullptr};
        for (int a = 0, next = 0; a < vt->nargs; ++a)
            if ((idx & (1 << a)) && next < argc) {
                bound[a] = argv[next++];
                cur->args[a] = sqlite3_value_dup(bound[a]);
                if (!cur->args[a]) throw std::bad_alloc();
            }
        sqlite3_value* model = bound[0];
        sqlite3_value* weights = vt->nargs == 3 ? bound[1] : nullptr;
        sqlite3_value* opts = bound[vt->nargs - 1];
        if (!model || sqlite3_value_type(model) == SQLITE_NULL) return SQLITE_OK;  // no rows
        if (sqlite3_value_type(model) != SQLITE_BLOB)
            throw groupfit::error(std::string("model must be a BLOB made by groupfit(), got ") +
                                  type_name(sqlite3_value_type(model)));
        // Option and weight texts are read up to their first NUL.
        std::string_view text, wtext;
        if (opts && sqlite3_value_type(opts) != SQLITE_NULL) {
            if (sqlite3_value_type(opts) != SQLITE_TEXT)
                throw groupfit::error(std::string("options must be text, got ") +
                                      type_name(sqlite3_value_type(opts)));
            text = text_of(opts).data();
        }
        if (vt->nargs == 3) {
            if (!weights || sqlite3_value_type(weights) != SQLITE_TEXT)
                throw groupfit::error(std::string("weights must be text such as 'a=1, b=-1', got ") +
                                      type_name(weights ? sqlite3_value_type(weights) : SQLITE_NULL));
            wtext = text_of(weights).data();
        }
        const groupfit::options o = groupfit::parse_options(text);
        const summary s = summary::deserialize(blob_of(model), vt->config->lim);
        if (s.cells() == 0)
            throw groupfit::error("the model has no usable rows (" +
                                  std::to_string(s.dropped_total()) +
                                  (s.dropped_total() == 1 ? " row was" : " rows were") +
                                  " dropped for NULLs or zero weights)");
        cur->result = vt->kind->make(s, o, wtext);
    } catch (...) {
        cur->result = groupfit::table{};
        clear_args(cur);
        return vtab_exception(c->pVtab, vt->kind->name);
    }
    return SQLITE_OK;
}

int report_next(sqlite3_vtab_cursor* c) noexcept {
    ++reinterpret_cast<report_cursor*>(c)->row;
    return SQLITE_OK;
}

int report_eof(sqlite3_vtab_cursor* c) noexcept {
    auto* cur = reinterpret_cast<report_cursor*>(c);
    return cur->row >= cur->result.rows.size();
}

/* Copies a kept argument into the result. Text and blobs go through
** sqlite3_result_text64/blob64, which report SQLITE_NOMEM on the context when
** the copy fails (so a failed copy never shows as a NULL). */
void result_copy(sqlite3_context* ctx, sqlite3_value* v) {
    switch (sqlite3_value_type(v)) {
    case SQLITE_INTEGER: return sqlite3_result_int64(ctx, sqlite3_value_int64(v));
    case SQLITE_FLOAT: return sqlite3_result_double(ctx, sqlite3_value_double(v));
    case SQLITE_TEXT: {
        const std::string_view t = text_of(v);
        return sqlite3_result_text64(ctx, t.data(), t.size(), SQLITE_TRANSIENT, SQLITE_UTF8);
    }
    case SQLITE_BLOB: {
        const std::string_view b = blob_of(v);
        return sqlite3_result_blob64(ctx, b.empty() ? "" : b.data(), b.size(), SQLITE_TRANSIENT);
    }
    default: return sqlite3_result_null(ctx);
    }
}

int report_column(sqlite3_vtab_cursor* c, sqlite3_context* ctx, int col) noexcept {
    auto* cur = reinterpret_cast<report_cursor*>(c);
    auto* vt = reinterpret_cast<report_vtab*>(c->pVtab);
    try {
        if (col >= vt->ncol) {
            sqlite3_value* a = col - vt->ncol < vt->nargs ? cur->args[col - vt->ncol] : nullptr;
            if (a) result_copy(ctx, a);
            return SQLITE_OK;
        }
        const groupfit::value& v = cur->result.rows[cur->row][col];
        if (auto* i = std::get_if<std::int64_t>(&v)) sqlite3_result_int64(ctx, *i);
        else if (auto* d = std::get_if<double>(&v)) sqlite3_result_double(ctx, *d);
        else if (auto* s = std::get_if<std::string>(&v))
            sqlite3_result_text64(ctx, s->data(), s->size(), SQLITE_TRANSIENT, SQLITE_UTF8);
        else sqlite3_result_null(ctx);
    } catch (const std::bad_alloc&) {
        sqlite3_result_error_nomem(ctx);
    } catch (...) {
        return vtab_exception(c->pVtab, vt->kind->name);
    }
    return SQLITE_OK;
}

int report_rowid(sqlite3_vtab_cursor* c, sqlite3_int64* out) noexcept {
    *out = static_cast<sqlite3_int64>(reinterpret_cast<report_cursor*>(c)->row) + 1;
    return SQLITE_OK;
}

sqlite3_module report_module = [] {
    sqlite3_module m{};
    m.iVersion = 0;
    m.xCreate = nullptr;  // eponymous only
    m.xConnect = report_connect;
    m.xBestIndex = report_best_index;
    m.xDisconnect = report_disconnect;
    m.xDestroy = report_disconnect;
    m.xOpen = report_open;
    m.xClose = report_close;
    m.xFilter = report_filter;
    m.xNext = report_next;
    m.xEof = report_eof;
    m.xColumn = report_column;
    m.xRowid = report_rowid;
    return m;
}();

void free_module_aux(void* p) noexcept {
    auto* a = static_cast<report_module_aux*>(p);
    release_config(a->config);
    delete a;
}

/* ---------------------------------------------------------------- groupfit_cross
** groupfit_cross(a, b [, ...]): one cell of crossed factors, as a BLOB that
** groupfit() takes as its grouping argument. NULL when any value is NULL (the
** row is then dropped as a NULL grouping). */
void cross_func(sqlite3_context* ctx, int argc, sqlite3_value** argv) {
    guarded(ctx, "groupfit_cross", [&] {
        if (argc < 2 || argc > groupfit::max_factors)
            throw groupfit::error("takes 2 to " + std::to_string(groupfit::max_factors) +
                                  " factors, got " + std::to_string(argc));
        std::vector<groupfit::level> parts;
        for (int i = 0; i < argc; ++i) {
            sqlite3_value* v = argv[i];
            switch (sqlite3_value_type(v)) {
            case SQLITE_NULL: return sqlite3_result_null(ctx);
            case SQLITE_INTEGER: parts.push_back(groupfit::level::from_integer(sqlite3_value_int64(v))); break;
            case SQLITE_FLOAT: parts.push_back(groupfit::level::from_real(sqlite3_value_double(v))); break;
            case SQLITE_TEXT: {
                const unsigned char* t = sqlite3_value_text(v);
                if (!t) throw std::bad_alloc();
                parts.push_back(groupfit::level::from_text(
                    std::string_view(reinterpret_cast<const char*>(t), sqlite3_value_bytes(v))));
                break;
            }
            default: {
                const void* b = sqlite3_value_blob(v);
                parts.push_back(groupfit::level::from_blob(
                    std::string_view(static_cast<const char*>(b ? b : ""), sqlite3_value_bytes(v))));
            }
            }
        }
        const std::string out = groupfit::encode_cross(parts);
        sqlite3_result_blob64(ctx, out.data(), out.size(), SQLITE_TRANSIENT);
    });
}

/* ---------------------------------------------------------------- registration */

constexpr int pure = SQLITE_UTF8 | SQLITE_DETERMINISTIC | SQLITE_INNOCUOUS;

struct function_entry {
    const char* name;
    int nargs;
    int flags;
    void (*func)(sqlite3_context*, int, sqlite3_value**);
    void (*step)(sqlite3_context*, int, sqlite3_value**);
    void (*final)(sqlite3_context*);
};

const function_entry functions[] = {
    {"groupfit", -1, pure, nullptr, groupfit_step, groupfit_final},
    {"groupfit_weighted", -1, pure, nullptr, groupfit_weighted_step, groupfit_weighted_final},
    {"groupfit_merge", 1, pure, nullptr, merge_step, merge_final},
    {"groupfit_cross", -1, pure, cross_func, nullptr, nullptr},
    // Changes per-connection state: never usable from views, triggers or schemas.
    {"groupfit_limit", 1, SQLITE_UTF8 | SQLITE_DIRECTONLY, limit_func, nullptr, nullptr},
    {"groupfit_limit", 2, SQLITE_UTF8 | SQLITE_DIRECTONLY, limit_func, nullptr, nullptr},
};

}  // namespace

extern "C"
#ifdef _WIN32
__declspec(dllexport)
#else
__attribute__((visibility("default")))
#endif
int sqlite3_groupfit_init(sqlite3* db, char** err, const sqlite3_api_routines* api) noexcept {
    SQLITE_EXTENSION_INIT2(api);
    auto* config = new (std::nothrow) connection_config();
    if (!config) {
        if (err) *err = sqlite3_mprintf("groupfit: registration failed (%s)", sqlite3_errstr(SQLITE_NOMEM));
        return SQLITE_NOMEM;
    }
    config->refs = 1;  // held by this function until registration ends
    int rc = SQLITE_OK;
    for (const auto& f : functions) {
        ++config->refs;
        rc = sqlite3_create_function_v2(db, f.name, f.nargs, f.flags, config, f.func, f.step,
                                        f.final, release_config);
        if (rc != SQLITE_OK) break;  // xDestroy has already run on failure
    }
    for (const auto& r : reports) {
        if (rc != SQLITE_OK) break;
        auto* aux = new (std::nothrow) report_module_aux{&r, config};
        if (!aux) {
            rc = SQLITE_NOMEM;
            break;
        }
        ++config->refs;
        rc = sqlite3_create_module_v2(db, r.name, &report_module, aux, free_module_aux);
    }
    if (rc != SQLITE_OK && err) *err = sqlite3_mprintf("groupfit: registration failed (%s)", sqlite3_errstr(rc));
    release_config(config);
    return rc;
}
