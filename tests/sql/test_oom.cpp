// Out-of-memory behaviour of the built extension (groupfit.so) through the real
// SQLite C API.
//
// Two allocators are wrapped for the whole test process:
//   * SQLite's, with SQLITE_CONFIG_MALLOC around the default methods (read
//     with SQLITE_CONFIG_GETMALLOC) before sqlite3_initialize, and
//   * C++'s: every replaceable global operator new / new[] (plain, nothrow,
//     aligned, aligned nothrow) and the matching operator delete / delete[]
//     are replaced in this executable. The module is a separate .so, but its
//     calls to operator new bind to the process's definition, which is this
//     one; ModuleAllocatesThroughTheReplacedOperatorNew proves that by the
//     return addresses of the calls.
// Both wrappers count live blocks and bytes, and both consult one shared
// allocation counter that, while armed, fails the Nth allocation (transient:
// only the Nth; persistent: the Nth and every later one until disarmed).
// A failed operator new throws std::bad_alloc (nothrow forms return nullptr).
//
// Each scenario is a list of SQL statements (load the module, create a table,
// insert rows, then the groupfit calls under test). For N = 1, 2, 3, ... until
// the scenario completes without a failed allocation, a fresh connection runs
// it with allocation N failing (loading the module included). Required:
//   * no crash, and no C++ exception escapes through SQLite into the caller;
//   * the statement that meets the failure returns SQLITE_NOMEM (or, if the
//     fault-free reference also fails, the reference's own error); every row it
//     returned before failing, and every statement that succeeds, equals the
//     fault-free reference bit for bit;
//   * a statement ends as if nothing had failed only when every failure it
//     met was of an optional allocation (see "Optional allocations" below);
//   * afterwards, with failures off, the same connection answers SELECT 1 and
//     runs the whole scenario again with the reference's results;
//   * sqlite3_close succeeds, and the live blocks and bytes of both allocators
//     are back to what they were before the connection was opened (no leak).
// Each sweep runs in a child process: a crash (or a sanitizer's abort) is
// reported with the allocation that was failing, and the sweep goes on after
// it. In the sanitize build the child also runs LeakSanitizer's check at the
// end. One failure point can be rerun in this process, e.g. under gdb:
//   GROUPFIT_OOM_REPRO=coef,transient,210 test_oom --gtest_filter='*coef_transient'
// Every allocation point of every scenario is failed, in every build (the
// scenarios are kept small enough for that: see scenarios()). Not covered:
// Eigen's matrices allocate with std::malloc, not operator new, so those
// allocations are neither failed nor counted (LeakSanitizer still sees them).
#include <gtest/gtest.h>
#include <sqlite3.h>

#include <dlfcn.h>
#include <link.h>
#include <malloc.h>
#include <sys/mman.h>
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <atomic>
#include <climits>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <map>
#include <memory>
#include <new>
#include <string>
#include <vector>

#ifndef GROUPFIT_MODULE
#error "GROUPFIT_MODULE (path of the built groupfit.so) must be defined"
#endif

// ------------------------------------------------------- allocation fault hooks

namespace fault {

enum class mode { transient, persistent };

std::atomic<bool> armed{false};
std::atomic<long> seen{0};      // allocations requested while armed
std::atomic<long> fail_at{0};   // 0: never fail
std::atomic<bool> persistent{false};
std::atomic<long> injected{0};  // failures handed out since the last reset
std::atomic<int> first_failed_kind{0};  // 1 SQLite, 2 C++ (the first injected failure)

// Optional allocations: a failure the code may absorb, ending as if nothing had
// failed, because the allocation was optional by contract:
//   * SQLite's allocations inside a "benign malloc" region
//     (sqlite3BeginBenignMalloc .. sqlite3EndBenignMalloc): e.g. the page
//     cache's bulk allocation, or sqlite3VdbeTransferError copying a
//     statement's error message into the connection (when that fails the
//     statement keeps its error code but its message becomes the generic text
//     of the code). SQLite announces these regions through
//     SQLITE_TESTCTRL_BENIGN_MALLOC_HOOKS (installed with the allocator);
//   * the nothrow forms of operator new, whose caller handles nullptr (e.g.
//     std::stable_sort falls back to an in-place merge when
//     std::get_temporary_buffer gets no memory).
// Every other failed allocation ("required") must reach the caller as an error.
std::atomic<int> benign_depth{0};
std::atomic<long> benign_regions{0};       // benign regions entered (the harness checks the hooks work)
std::atomic<long> injected_required{0};    // failures of required allocations since the last reset
int benign_hooks_rc = -1;                  // result of installing the hooks
void benign_begin() {
    ++benign_depth;
    ++benign_regions;
}
void benign_end() { --benign_depth; }

// Live allocations of each allocator (whole process, armed or not).
std::atomic<long long> sqlite_blocks{0}, sqlite_bytes{0};
std::atomic<long long> cxx_blocks{0}, cxx_bytes{0};

// C++ allocations whose caller is code inside the loaded module.
std::atomic<std::uintptr_t> module_lo{0}, module_hi{0};
std::atomic<long> cxx_calls_armed{0}, cxx_calls_from_module{0};

int install_rc = -1;  // result of installing the SQLite wrapper

inline bool trip(int kind, bool optional) {
    if (!armed.load(std::memory_order_relaxed)) return false;
    const long n = seen.fetch_add(1, std::memory_order_relaxed) + 1;
    const long at = fail_at.load(std::memory_order_relaxed);
    if (at <= 0) return false;
    if (n == at || (n > at && persistent.load(std::memory_order_relaxed))) {
        if (injected.fetch_add(1, std::memory_order_relaxed) == 0) first_failed_kind = kind;
        if (!optional) ++injected_required;
        return true;
    }
    return false;
}

void reset(long at, mode m) {
    armed = false;
    seen = 0;
    fail_at = at;
    persistent = m == mode::persistent;
    injected = 0;
    injected_required = 0;
    first_failed_kind = 0;
}

struct snapshot {
    long long sb, sbytes, cb, cbytes;
    bool operator==(const snapshot&) const = default;
};
snapshot live() { return {sqlite_blocks.load(), sqlite_bytes.load(), cxx_blocks.load(), cxx_bytes.load()}; }
std::string describe(const snapshot& s) {
    return "sqlite " + std::to_string(s.sb) + " blocks/" + std::to_string(s.sbytes) + " bytes, C++ " +
           std::to_string(s.cb) + " blocks/" + std::to_string(s.cbytes) + " bytes";
}

// ---- SQLite: wrap the default methods.
sqlite3_mem_methods base{};

void* x_malloc(int n) {
    if (trip(1, benign_depth > 0)) return nullptr;
    void* p = base.xMalloc(n);
    if (p) {
        ++sqlite_blocks;
        sqlite_bytes += base.xSize(p);
    }
    return p;
}
void x_free(void* p) {
    if (p) {
        --sqlite_blocks;
        sqlite_bytes -= base.xSize(p);
    }
    base.xFree(p);
}
void* x_realloc(void* p, int n) {
    if (trip(1, benign_depth > 0)) return nullptr;
    const int old = p ? base.xSize(p) : 0;
    void* q = base.xRealloc(p, n);
    if (q) {
        if (!p) ++sqlite_blocks;
        sqlite_bytes += base.xSize(q) - old;
    }
    return q;
}
int x_size(void* p) { return base.xSize(p); }
int x_roundup(int n) { return base.xRoundup(n); }
int x_init(void* a) { return base.xInit(a); }
void x_shutdown(void* a) { base.xShutdown(a); }

// Runs before main(), so before anything can call sqlite3_initialize().
struct installer {
    installer() {
        int rc = sqlite3_config(SQLITE_CONFIG_GETMALLOC, &base);
        if (rc == SQLITE_OK) {
            static sqlite3_mem_methods wrapped{x_malloc, x_free,     x_realloc, x_size,
                                               x_roundup, x_init, x_shutdown, base.pAppData};
            rc = sqlite3_config(SQLITE_CONFIG_MALLOC, &wrapped);
        }
        install_rc = rc;
        using hook = void (*)(void);
        benign_hooks_rc = sqlite3_test_control(SQLITE_TESTCTRL_BENIGN_MALLOC_HOOKS, static_cast<hook>(benign_begin),
                                               static_cast<hook>(benign_end));
    }
} install_now;

// ---- C++: the replaced operators share these two functions.
inline void note_cxx(void* caller) {
    if (!armed.load(std::memory_order_relaxed)) return;
    ++cxx_calls_armed;
    const auto a = reinterpret_cast<std::uintptr_t>(caller);
    if (a >= module_lo.load(std::memory_order_relaxed) && a < module_hi.load(std::memory_order_relaxed))
        ++cxx_calls_from_module;
}

void* cxx_alloc(std::size_t n, std::size_t align, bool nothrow, void* caller) noexcept {
    note_cxx(caller);
    if (trip(2, nothrow)) return nullptr;
    if (n == 0) n = 1;
    void* p = nullptr;
    if (align <= alignof(std::max_align_t)) {
        p = std::malloc(n);
    } else {
        if (posix_memalign(&p, align, n) != 0) p = nullptr;
    }
    if (p) {
        ++cxx_blocks;
        cxx_bytes += static_cast<long long>(malloc_usable_size(p));
    }
    return p;
}

void cxx_free(void* p) noexcept {
    if (!p) return;
    --cxx_blocks;
    cxx_bytes -= static_cast<long long>(malloc_usable_size(p));
    std::free(p);
}

}  // namespace fault

#define GF_CALLER __builtin_return_address(0)

void* operator new(std::size_t n) {
    if (void* p = fault::cxx_alloc(n, 0, false, GF_CALLER)) return p;
    throw std::bad_alloc();
}
void* operator new[](std::size_t n) {
    if (void* p = fault::cxx_alloc(n, 0, false, GF_CALLER)) return p;
    throw std::bad_alloc();
}
void* operator new(std::size_t n, const std::nothrow_t&) noexcept { return fault::cxx_alloc(n, 0, true, GF_CALLER); }
void* operator new[](std::size_t n, const std::nothrow_t&) noexcept {
    return fault::cxx_alloc(n, 0, true, GF_CALLER);
}
void* operator new(std::size_t n, std::align_val_t a) {
    if (void* p = fault::cxx_alloc(n, static_cast<std::size_t>(a), false, GF_CALLER)) return p;
    throw std::bad_alloc();
}
void* operator new[](std::size_t n, std::align_val_t a) {
    if (void* p = fault::cxx_alloc(n, static_cast<std::size_t>(a), false, GF_CALLER)) return p;
    throw std::bad_alloc();
}
void* operator new(std::size_t n, std::align_val_t a, const std::nothrow_t&) noexcept {
    return fault::cxx_alloc(n, static_cast<std::size_t>(a), true, GF_CALLER);
}
void* operator new[](std::size_t n, std::align_val_t a, const std::nothrow_t&) noexcept {
    return fault::cxx_alloc(n, static_cast<std::size_t>(a), true, GF_CALLER);
}
void operator delete(void* p) noexcept { fault::cxx_free(p); }
void operator delete[](void* p) noexcept { fault::cxx_free(p); }
void operator delete(void* p, std::size_t) noexcept { fault::cxx_free(p); }
void operator delete[](void* p, std::size_t) noexcept { fault::cxx_free(p); }
void operator delete(void* p, const std::nothrow_t&) noexcept { fault::cxx_free(p); }
void operator delete[](void* p, const std::nothrow_t&) noexcept { fault::cxx_free(p); }
void operator delete(void* p, std::align_val_t) noexcept { fault::cxx_free(p); }
void operator delete[](void* p, std::align_val_t) noexcept { fault::cxx_free(p); }
void operator delete(void* p, std::size_t, std::align_val_t) noexcept { fault::cxx_free(p); }
void operator delete[](void* p, std::size_t, std::align_val_t) noexcept { fault::cxx_free(p); }
void operator delete(void* p, std::align_val_t, const std::nothrow_t&) noexcept { fault::cxx_free(p); }
void operator delete[](void* p, std::align_val_t, const std::nothrow_t&) noexcept { fault::cxx_free(p); }

namespace {

// ------------------------------------------------------------------ SQL runner

// One result value, compared exactly: type and bytes (reals bit for bit).
struct cell {
    int type = SQLITE_NULL;
    std::string bytes;
    bool operator==(const cell&) const = default;
};
using row = std::vector<cell>;

std::string show(const cell& c) {
    switch (c.type) {
    case SQLITE_NULL: return "NULL";
    case SQLITE_INTEGER: {
        std::int64_t i;
        std::memcpy(&i, c.bytes.data(), sizeof i);
        return std::to_string(i);
    }
    case SQLITE_FLOAT: {
        double d;
        std::memcpy(&d, c.bytes.data(), sizeof d);
        char b[40];
        std::snprintf(b, sizeof b, "%.17g", d);
        return b;
    }
    case SQLITE_TEXT: return "'" + c.bytes + "'";
    default: return "blob(" + std::to_string(c.bytes.size()) + ")";
    }
}

struct outcome {
    int rc = SQLITE_OK;  // SQLITE_OK, or the error code of prepare/step/load
    std::string message;
    std::vector<row> rows;
    bool escaped = false;  // a C++ exception came out of an SQLite call
    std::string escaped_what;
    bool ok() const { return rc == SQLITE_OK && !escaped; }
};

// Calls into SQLite with the fault counter armed or not; a C++ exception that
// escapes from SQLite (it must never) is caught here and recorded.
template <class F>
int call(bool arm, outcome& out, F&& f) {
    fault::armed = arm;
    int rc = SQLITE_ERROR;
    try {
        rc = f();
    } catch (const std::exception& e) {
        fault::armed = false;
        out.escaped = true;
        out.escaped_what = e.what();
    } catch (...) {
        fault::armed = false;
        out.escaped = true;
        out.escaped_what = "non-standard exception";
    }
    fault::armed = false;
    return rc;
}

constexpr const char* load_statement = ".load";  // pseudo-statement: load the module

outcome load_module(sqlite3* db, bool arm) {
    outcome out;
    call(false, out, [&] { return sqlite3_enable_load_extension(db, 1); });
    char* err = nullptr;
    const int rc = call(arm, out, [&] { return sqlite3_load_extension(db, GROUPFIT_MODULE, nullptr, &err); });
    if (rc != SQLITE_OK) {
        out.rc = rc;
        out.message = err ? err : "<no message>";
    }
    sqlite3_free(err);
    return out;
}

outcome run(sqlite3* db, const std::string& sql, bool arm) {
    if (sql == load_statement) return load_module(db, arm);
    outcome out;
    sqlite3_stmt* st = nullptr;
    int rc = call(arm, out, [&] { return sqlite3_prepare_v2(db, sql.c_str(), -1, &st, nullptr); });
    if (out.escaped) return out;
    if (rc != SQLITE_OK) {
        out.rc = rc;
        out.message = sqlite3_errmsg(db);
        sqlite3_finalize(st);
        return out;
    }
    const int n = sqlite3_column_count(st);
    while (true) {
        rc = call(arm, out, [&] { return sqlite3_step(st); });
        if (out.escaped || rc != SQLITE_ROW) break;
        row r(n);
        bool column_failed = false;
        for (int c = 0; c < n && !column_failed; ++c) {
            int type = SQLITE_NULL;
            const void* p = nullptr;
            int len = 0;
            sqlite3_int64 i = 0;
            double d = 0;
            call(arm, out, [&] {
                type = sqlite3_column_type(st, c);
                if (type == SQLITE_INTEGER) i = sqlite3_column_int64(st, c);
                else if (type == SQLITE_FLOAT) d = sqlite3_column_double(st, c);
                else if (type == SQLITE_TEXT) p = sqlite3_column_text(st, c);
                else if (type == SQLITE_BLOB) p = sqlite3_column_blob(st, c);
                if (type == SQLITE_TEXT || type == SQLITE_BLOB) len = sqlite3_column_bytes(st, c);
                return SQLITE_OK;
            });
            r[c].type = type;
            if (type == SQLITE_INTEGER) r[c].bytes.assign(reinterpret_cast<const char*>(&i), sizeof i);
            else if (type == SQLITE_FLOAT) r[c].bytes.assign(reinterpret_cast<const char*>(&d), sizeof d);
            else if (type == SQLITE_TEXT || type == SQLITE_BLOB) {
                // sqlite3_column_text/blob return NULL when they run out of
                // memory (e.g. adding the text's terminator); an empty text is
                // never NULL, an empty blob is.
                if (!p && (type == SQLITE_TEXT || len > 0)) column_failed = true;
                else r[c].bytes.assign(static_cast<const char*>(p), len);
            }
        }
        if (column_failed) {
            rc = sqlite3_errcode(db);
            break;
        }
        out.rows.push_back(std::move(r));
    }
    if (!out.escaped && rc != SQLITE_DONE) {
        out.rc = rc;
        out.message = sqlite3_errmsg(db);
    }
    sqlite3_finalize(st);
    return out;
}

// ------------------------------------------------------------------ scenarios

struct scenario {
    const char* name;
    std::vector<std::string> statements;
    // Statements before this index run without failures (the setup of report
    // scenarios: loading and filling the table are swept by "aggregate").
    std::size_t armed_from = 0;
};

// Small data: four levels (one integer-looking text), a covariate, weights,
// segments, and rows dropped for NULLs and a zero weight. Rerunnable on the
// same connection: it drops what it creates.
std::vector<std::string> setup() {
    return {
        load_statement,
        "DROP TABLE IF EXISTS t",
        "CREATE TABLE t(seg INTEGER, g TEXT, y REAL, x REAL, w REAL)",
        "INSERT INTO t VALUES "
        "(1, 'a', 1.5, 1.0, 1.0), (1, 'a', 3.25, 2.0, 2.0), (2, 'a', 2.0, 1.5, 0.5), (2, 'a', 2.75, 2.5, 1.0), "
        "(1, 'b', 5.0, 1.0, 1.0), (2, 'b', 9.5, 4.0, 1.5), (1, 'b', 7.0, 2.5, 1.0), (2, 'b', 6.0, 3.0, 2.0), "
        "(1, 'c', 2.5, 0.0, 1.0), (2, 'c', 4.75, 1.0, 3.0), (1, 'c', 3.5, 0.5, 1.0), "
        "(1, 'd 4', 8.0, 3.0, 1.0), (2, 'd 4', 10.25, 4.5, 2.0), (2, 'd 4', 9.0, 3.5, 1.0), "
        "(1, NULL, 4.0, 1.0, 1.0), (2, 'a', NULL, 1.0, 1.0), (1, 'b', 6.5, NULL, 1.0), (2, 'c', 3.0, 1.0, 0)",
    };
}

std::vector<scenario> scenarios() {
    const std::string m = "(SELECT groupfit(y, g, x) FROM t)";
    const std::string m0 = "(SELECT groupfit(y, g) FROM t)";
    // Two levels, one-sided: the product-form integral of Dunnett's one
    // comparison (its adjusted p-value and critical value) takes about 460 C++
    // allocations; more levels or two sides take many more.
    const std::string m2 = "(SELECT groupfit(y, g, x) FROM t WHERE g IN ('a', 'b'))";
    const std::size_t after_setup = setup().size();
    std::string covariates32;  // ", x + 0, x + 1, ..., x + 31"
    for (int k = 0; k < 32; ++k) covariates32 += ", x + " + std::to_string(k);
    // Loading the module, creating and filling the table are swept in the
    // aggregate scenarios; the report scenarios fail only their own statements.
    auto all_armed = [](std::vector<std::string> tail) {
        std::vector<std::string> all = setup();
        all.insert(all.end(), tail.begin(), tail.end());
        return all;
    };
    auto with_setup = all_armed;
    return {
        {"aggregate",
         all_armed({"SELECT groupfit(y, g) FROM t", "SELECT groupfit(y, g, x, w) FROM t",
                    "SELECT seg, groupfit(y, g, x) FROM t GROUP BY seg ORDER BY seg",
                    "SELECT groupfit(y, seg) FROM t", "SELECT typeof(groupfit(y, g)) FROM t WHERE 0"}),
         0},
        {"weighted",
         all_armed({"SELECT groupfit_weighted(w, y, g) FROM t", "SELECT groupfit_weighted(w, y, g, x) FROM t",
                    "SELECT seg, groupfit_weighted(w, y, g, x) FROM t GROUP BY seg ORDER BY seg"}),
         0},
        {"merge",
         all_armed({"DROP TABLE IF EXISTS parts",
                    "CREATE TABLE parts AS SELECT seg, groupfit(y, g, x) AS m, "
                    "groupfit_weighted(w, y, g, x) AS wm FROM t GROUP BY seg",
                    "SELECT groupfit_merge(m) FROM (SELECT m FROM parts ORDER BY seg)",
                    "SELECT groupfit_merge(wm) FROM (SELECT wm FROM parts ORDER BY seg DESC)",
                    "SELECT groupfit_merge(m) FROM (SELECT NULL AS m UNION ALL SELECT m FROM parts)"}),
         0},
        // The batched row path (summary::add_batch): with 32 covariates a
        // level's state is 9.5 KiB, so the aggregate switches to batches after
        // 28 levels; 40 levels of more than 8 bytes, 100 rows (a partial
        // batch left for the final step). Only the aggregate statement is armed.
        {"batch",
         with_setup({"DROP TABLE IF EXISTS b",
                     "CREATE TABLE b AS WITH RECURSIVE c(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM c "
                     "WHERE i < 99) SELECT 'level-' || (i % 40) AS g, i % 7 + 0.5 * (i % 40) AS y, "
                     "(i * 13 % 17) / 4.0 AS x FROM c",
                     "SELECT hex(groupfit(y, g" + covariates32 + ")) FROM b"}),
         after_setup + 2},
        {"coef",
         with_setup({"SELECT * FROM groupfit_coef(" + m + ")",
                     "SELECT * FROM groupfit_coef(" + m + ", 'coding=effect; names=grp, x; conf=0.9')",
                     "SELECT * FROM groupfit_coef(" + m0 + ", 'coding=helmert; order=c, a')",
                     "SELECT * FROM groupfit_coef(" + m0 +
                         ", 'coding=custom; custom=1, -1, 0, 0 / 1, 1, -1, -1 / 0, 0, 1, -1')",
                     "SELECT label, model IS NOT NULL, options FROM groupfit_coef(" + m +
                         ", 'coding=weighted_effect; base=b')",
                     "SELECT s.seg, c.label, c.estimate FROM (SELECT seg, groupfit(y, g) AS m FROM t GROUP BY seg) "
                     "AS s, groupfit_coef(s.m) AS c ORDER BY s.seg, c.rowid"}),
         after_setup},
        {"levels",
         with_setup({"SELECT * FROM groupfit_levels(" + m + ")",
                     "SELECT * FROM groupfit_levels(" + m + ", 'order=c, b; conf=0.99; names=grp, x')",
                     "SELECT level, options FROM groupfit_levels(" + m + ", 'names=grp, x; at=x:2')"}),
         after_setup},
        {"deviations",
         with_setup({"SELECT * FROM groupfit_deviations(" + m + ")",
                     "SELECT * FROM groupfit_deviations(" + m0 + ", 'conf=0.9; order=b')"}),
         after_setup},
        {"tests",
         with_setup({"SELECT * FROM groupfit_tests(" + m + ")", "SELECT * FROM groupfit_tests(" + m + ", 'ss=1')",
                     "SELECT * FROM groupfit_tests(" + m0 + ")"}),
         after_setup},
        {"summary",
         with_setup({"SELECT * FROM groupfit_summary(" + m + ")",
                     "SELECT * FROM groupfit_summary((SELECT groupfit_weighted(w, y, g, x) FROM t), 'names=k, x')"}),
         after_setup},
        {"pairs",
         with_setup({"SELECT * FROM groupfit_pairs(" + m + ")",
                     "SELECT * FROM groupfit_pairs(" + m0 + ", 'adjust=holm; conf=0.9')",
                     "SELECT * FROM groupfit_pairs(" + m0 + ", 'adjust=scheffe')",
                     "SELECT * FROM groupfit_pairs(" + m + ", 'adjust=bonferroni; vs=c')"}),
         after_setup},
        {"dunnett",
         with_setup({"SELECT * FROM groupfit_pairs(" + m2 + ", 'vs=b; side=greater; conf=0.9')"}),
         after_setup},
        // Crossed factors (core/factorial.cpp): the general path's reports, one
        // scenario each (an attempt reruns its whole scenario, so five small
        // ones cost a fifth of one with all five statements).
        {"cross_tests",
         with_setup({"SELECT * FROM groupfit_tests((SELECT groupfit(y, groupfit_cross(g, seg), x) FROM t))"}),
         after_setup},
        {"cross_levels",
         with_setup({"SELECT * FROM groupfit_levels((SELECT groupfit(y, groupfit_cross(g, seg)) FROM t), "
                     "'means=proportional')"}),
         after_setup},
        {"cross_coef",
         with_setup({"SELECT * FROM groupfit_coef((SELECT groupfit(y, groupfit_cross(g, seg), x) FROM t), "
                     "'coding=effect; terms=main')"}),
         after_setup},
        {"cross_pairs",
         with_setup({"SELECT * FROM groupfit_pairs((SELECT groupfit(y, groupfit_cross(g, seg)) FROM t), "
                     "'by=factor2; adjust=holm')"}),
         after_setup},
        {"slopes",
         with_setup({"SELECT * FROM groupfit_summary((SELECT groupfit(y, g, x) FROM t), 'slopes=separate')"}),
         after_setup},
        {"contrast",
         with_setup({"SELECT * FROM groupfit_contrast(" + m + ", 'a=1, b=-1')",
                     "SELECT * FROM groupfit_contrast(" + m + ", 'a=1, b=-1; c=1, \"d 4\"=-1', 'conf=0.9')",
                     "SELECT weights, options FROM groupfit_contrast(" + m0 +
                         ", 'a=0.5, b=0.5, c=-1', 'conf=0.8')"}),
         after_setup},
        // Statements whose fault-free result is an error: under a failure they
        // must give that same error or SQLITE_NOMEM.
        {"errors",
         with_setup({"SELECT * FROM groupfit_coef(" + m + ", 'coding=foo')",
                     "SELECT groupfit(y, g, 'x') FROM t",
                     "SELECT * FROM groupfit_coef(x'00')",
                     "SELECT * FROM groupfit_contrast(" + m + ", 'zz=1')",
                     "SELECT * FROM groupfit_coef((SELECT groupfit(y, g) FROM t WHERE y IS NULL))",
                     "SELECT groupfit_merge(m) FROM (SELECT groupfit(y, g) AS m FROM t UNION ALL "
                     "SELECT groupfit(y, g, x) FROM t)",
                     "SELECT groupfit_limit('levels', 2) > 0", "SELECT groupfit(y, g) FROM t",
                     "SELECT groupfit_limit('levels', 50000) > 0"}),
         after_setup},
    };
}

// ------------------------------------------------------------- the harness

struct sweep_counts {
    long points = 0;      // allocation points failed (attempts that injected a failure)
    long cxx_points = 0;  // of them, the first failure was a C++ operator new
    long load_failed = 0; // of them, the failure made loading the module fail
    long nomem = 0;       // of them, a statement returned SQLITE_NOMEM
    long absorbed = 0;    // of them, only optional allocations failed and nothing changed
    long total_allocs = 0;
};

std::vector<outcome> reference_of(const scenario& s, std::string& problem) {
    std::vector<outcome> ref;
    sqlite3* db = nullptr;
    if (sqlite3_open(":memory:", &db) != SQLITE_OK) {
        problem = "cannot open a database";
        sqlite3_close(db);
        return ref;
    }
    for (const auto& sql : s.statements) ref.push_back(run(db, sql, false));
    if (sqlite3_close(db) != SQLITE_OK) problem = "sqlite3_close failed after the reference run";
    return ref;
}

bool same_outcome(const outcome& a, const outcome& b) {
    return a.rc == b.rc && a.message == b.message && a.rows == b.rows && !a.escaped && !b.escaped;
}

std::string first_difference(const outcome& got, const outcome& want) {
    if (got.escaped) return "C++ exception escaped from SQLite: " + got.escaped_what;
    if (got.rc != want.rc || got.message != want.message)
        return "rc " + std::to_string(got.rc) + " '" + got.message + "' instead of rc " + std::to_string(want.rc) +
               " '" + want.message + "'";
    if (got.rows.size() != want.rows.size())
        return std::to_string(got.rows.size()) + " rows instead of " + std::to_string(want.rows.size());
    for (std::size_t r = 0; r < got.rows.size(); ++r)
        for (std::size_t c = 0; c < got.rows[r].size() && c < want.rows[r].size(); ++c)
            if (!(got.rows[r][c] == want.rows[r][c]))
                return "row " + std::to_string(r + 1) + " column " + std::to_string(c + 1) + ": " +
                       show(got.rows[r][c]) + " instead of " + show(want.rows[r][c]);
    return "rows differ";
}

// One attempt with allocation `at` failing. Returns the problems found (empty:
// none) and sets `injected` to the failures handed out in the armed part.
std::string attempt(const scenario& s, const std::vector<outcome>& ref, long at, fault::mode m,
                    sweep_counts& counts, long& injected) {
    std::string problems;
    auto problem = [&](const std::string& p) {
        if (problems.size() < 4000) problems += "\n    " + p;
    };
    const fault::snapshot before = fault::live();
    {
        sqlite3* db = nullptr;
        if (sqlite3_open(":memory:", &db) != SQLITE_OK) {
            sqlite3_close(db);
            return "\n    cannot open a database";
        }
        fault::reset(at, m);
        bool load_failed = false;
        std::size_t i = 0;
        for (; i < s.statements.size(); ++i) {
            const std::string& sql = s.statements[i];
            if (i < s.armed_from) {  // not swept here: must simply work
                outcome got = run(db, sql, false);
                if (!same_outcome(got, ref[i])) {
                    problem("unarmed statement " + std::to_string(i + 1) + " [" + sql + "]: " +
                            first_difference(got, ref[i]));
                    break;
                }
                continue;
            }
            const long injected_before = fault::injected, required_before = fault::injected_required;
            outcome got = run(db, sql, true);
            // Failures of required allocations met by this statement (see "Optional allocations").
            const bool required_failed = fault::injected_required > required_before;
            if (got.escaped) {
                problem("statement " + std::to_string(i + 1) + " [" + sql +
                        "]: C++ exception escaped from SQLite: " + got.escaped_what);
                break;
            }
            if (got.ok() || same_outcome(got, ref[i])) {
                if (!same_outcome(got, ref[i]))
                    problem("statement " + std::to_string(i + 1) + " [" + sql +
                            "] succeeded with a wrong result: " + first_difference(got, ref[i]));
                else if (required_failed)
                    problem("statement " + std::to_string(i + 1) + " [" + sql +
                            "] ended as without failures although a required allocation failed: the "
                            "out-of-memory error was lost");
                else if (fault::injected > injected_before)
                    ++counts.absorbed;
                continue;
            }
            // It failed: for lack of memory, and only while failures were injected.
            if (fault::injected == 0)
                problem("statement " + std::to_string(i + 1) + " [" + sql + "] failed with rc " +
                        std::to_string(got.rc) + " '" + got.message + "' but no allocation had failed");
            // sqlite3_load_extension reports any failure of the entry point
            // as SQLITE_ERROR "error during initialization: <message>" (and
            // sqlite3_create_function_v2 has cleared the malloc-failed flag by
            // then), so there the message must say that memory ran out.
            // Under persistent failures SQLite cannot even allocate that message.
            const bool load_nomem = sql == load_statement && got.rc == SQLITE_ERROR &&
                                    (got.message.find("out of memory") != std::string::npos ||
                                     (m == fault::mode::persistent && got.message == "<no message>"));
            // The statement's own error, with SQLite's generic text for its
            // code: SQLite could not copy the message (sqlite3VdbeTransferError
            // does that in a benign-malloc region and drops the text when it
            // fails); the code is still the right one. Only when no required
            // allocation failed: otherwise the answer must be SQLITE_NOMEM.
            const bool own_error_without_text = !ref[i].ok() && got.rc == ref[i].rc &&
                                                got.message == sqlite3_errstr(got.rc) && !required_failed;
            if ((got.rc & 0xff) != SQLITE_NOMEM && !load_nomem && !own_error_without_text)
                problem("statement " + std::to_string(i + 1) + " [" + sql + "] failed with rc " +
                        std::to_string(got.rc) + " '" + got.message + "' instead of SQLITE_NOMEM" +
                        (ref[i].ok() ? "" : " or its own error '" + ref[i].message + "'"));
            else ++counts.nomem;
            // Rows returned before the failure must be the reference's first rows.
            for (std::size_t r = 0; r < got.rows.size(); ++r)
                if (r >= ref[i].rows.size() || !(got.rows[r] == ref[i].rows[r])) {
                    std::string diff;
                    for (std::size_t c = 0; r < ref[i].rows.size() && c < got.rows[r].size(); ++c)
                        if (!(got.rows[r][c] == ref[i].rows[r][c]))
                            diff += " column " + std::to_string(c + 1) + ": " + show(got.rows[r][c]) +
                                    " instead of " + show(ref[i].rows[r][c]) + ";";
                    problem("statement " + std::to_string(i + 1) + " [" + sql + "] returned a wrong row " +
                            std::to_string(r + 1) + " before failing with rc " + std::to_string(got.rc) +
                            ":" + (diff.empty() ? " a row too many" : diff));
                    break;
                }
            if (sql == load_statement) load_failed = true;
            break;
        }
        injected = fault::injected;
        counts.total_allocs = std::max(counts.total_allocs, static_cast<long>(fault::seen));
        if (injected > 0) {
            ++counts.points;
            if (fault::first_failed_kind == 2) ++counts.cxx_points;
            if (load_failed) ++counts.load_failed;
        }
        fault::reset(0, m);

        // The connection is still usable: a plain query, then the whole scenario.
        if (problems.empty()) {
            outcome one = run(db, "SELECT 1", false);
            if (!one.ok() || one.rows.size() != 1 || show(one.rows[0][0]) != "1")
                problem("SELECT 1 after the failure: rc " + std::to_string(one.rc) + " '" + one.message + "'" +
                        (one.escaped ? " exception: " + one.escaped_what : ""));
            for (std::size_t k = 0; k < s.statements.size() && problems.empty(); ++k) {
                outcome again = run(db, s.statements[k], false);
                if (!same_outcome(again, ref[k]))
                    problem("rerun without failures, statement " + std::to_string(k + 1) + " [" +
                            s.statements[k] + "]: " + first_difference(again, ref[k]));
            }
        }
        const int close_rc = sqlite3_close(db);
        if (close_rc != SQLITE_OK) {
            problem("sqlite3_close: rc " + std::to_string(close_rc));
            sqlite3_close_v2(db);
        }
    }
    const fault::snapshot after = fault::live();
    if (!(after == before) && problems.empty())
        problem("leak: live allocations before opening the connection " + fault::describe(before) +
                ", after closing it " + fault::describe(after));
    return problems;
}

// State a sweep shares with the process that watches it (MAP_SHARED), so
// that a crash still tells at which allocation it happened and what had been
// counted so far.
struct shared_state {
    std::atomic<long> at;  // the allocation being failed now
    std::atomic<long> points, cxx_points, load_failed, nomem, absorbed;
    std::atomic<bool> done;  // the sweep reached a run without failures
    std::atomic<long> full_run;  // allocations of a fault-free run
};

// Runs a scenario with allocation start, start + 1, ... failing until it
// completes without a failure. Problems are written to `out` (one per line,
// newlines inside escaped as "\n    ").
void sweep(const scenario& s, fault::mode m, long start, shared_state& st, std::FILE* out) {
    auto report = [&](std::string text) {
        for (std::size_t i = 0; (i = text.find('\n', i)) != std::string::npos; i += 2) text.replace(i, 1, "\\n");
        std::fprintf(out, "%s\n", text.c_str());
        std::fflush(out);
    };
    std::string problem;
    const std::vector<outcome> ref = reference_of(s, problem);
    if (!problem.empty()) return report(problem);
    // The reference must be reproducible, or "equal to the reference" means nothing.
    const std::vector<outcome> ref2 = reference_of(s, problem);
    bool bad_reference = false;
    for (std::size_t i = 0; i < ref.size(); ++i) {
        if (!same_outcome(ref[i], ref2[i])) {
            report("the fault-free run is not reproducible at [" + s.statements[i] + "]: " +
                   first_difference(ref2[i], ref[i]));
            bad_reference = true;
        }
        // The fault-free run must work, and fail only where the scenario expects errors.
        const bool expect_error = std::string(s.name) == "errors" && i >= setup().size() &&
                                  s.statements[i].find("groupfit_limit") == std::string::npos;
        if (ref[i].ok() == expect_error) {
            report(std::string("fault-free run of [") + s.statements[i] + "]: " +
                   (ref[i].ok() ? "succeeded, expected an error" : "failed: " + ref[i].message));
            bad_reference = true;
        }
    }
    if (bad_reference) return;

    // How many allocations a fault-free run makes (and that it is right).
    {
        sweep_counts c;
        long injected = 0;
        const std::string p = attempt(s, ref, 0, m, c, injected);
        if (!p.empty()) return report(std::string(s.name) + ", no allocation failing:" + p);
        st.full_run = c.total_allocs;
    }
    constexpr long limit = 1000000;
    // Each distinct problem is reported when first met, with how often it
    // recurred at the end (unless the sweep crashes first).
    std::map<std::string, std::pair<long, long>> seen;  // problem -> first point, points
    for (long at = start; at < limit; ++at) {
        st.at = at;
        long injected = 0;
        sweep_counts c;
        const std::string p = attempt(s, ref, at, m, c, injected);
        st.points += c.points;
        st.cxx_points += c.cxx_points;
        st.load_failed += c.load_failed;
        st.nomem += c.nomem;
        st.absorbed += c.absorbed;
        const std::string where = std::string(s.name) + (m == fault::mode::persistent ? " persistent" : " transient");
        if (!p.empty()) {
            auto [it, first] = seen.try_emplace(p, at, 0);
            ++it->second.second;
            if (first) report(where + ", allocation " + std::to_string(at) + " failing:" + p);
        }
        if (injected == 0) {
            for (const auto& [problem, n] : seen)
                if (n.second > 1)
                    report(where + ": the problem first met at allocation " + std::to_string(n.first) +
                           " recurred, at " + std::to_string(n.second) + " allocation points in all");
            st.done = true;
            return;
        }
    }
    report(std::string(s.name) + ": still failing allocations after " + std::to_string(limit));
}

// LeakSanitizer's check, when the test is built with it (sanitize preset).
extern "C" int __lsan_do_recoverable_leak_check() __attribute__((weak));

// Runs the sweep in child processes: a crash is reported with the allocation
// that was failing, and the sweep goes on after it in a new child.
sweep_counts sweep_isolated(const scenario& s, fault::mode m, std::vector<std::string>& failures) {
    void* mem = mmap(nullptr, sizeof(shared_state), PROT_READ | PROT_WRITE, MAP_SHARED | MAP_ANONYMOUS, -1, 0);
    if (mem == MAP_FAILED) {
        failures.push_back("mmap failed");
        return {};
    }
    auto* st = new (mem) shared_state{};
    const std::string mode_name = m == fault::mode::persistent ? "persistent" : "transient";
    long start = 1;
    int crashes = 0;
    std::string more_crashes;  // allocation points of the crashes not listed one by one
    while (true) {
        int fds[2];
        if (pipe(fds) != 0) {
            failures.push_back("pipe failed");
            break;
        }
        std::fflush(nullptr);
        const pid_t pid = fork();
        if (pid < 0) {
            failures.push_back("fork failed");
            break;
        }
        if (pid == 0) {
            close(fds[0]);
            std::FILE* out = fdopen(fds[1], "w");
            sweep(s, m, start, *st, out);
            int code = 0;
            if (__lsan_do_recoverable_leak_check && __lsan_do_recoverable_leak_check() != 0) {
                std::fprintf(out, "LeakSanitizer found leaks in the %s %s sweep (report on stderr)\n", s.name,
                             mode_name.c_str());
                code = 1;
            }
            std::fclose(out);
            _exit(code);
        }
        close(fds[1]);
        std::FILE* in = fdopen(fds[0], "r");
        char line[8192];
        while (std::fgets(line, sizeof line, in)) {
            std::string text = line;
            if (!text.empty() && text.back() == '\n') text.pop_back();
            for (std::size_t i = 0; (i = text.find("\\n", i)) != std::string::npos;) text.replace(i, 2, "\n");
            failures.push_back(text);
        }
        std::fclose(in);
        int status = 0;
        waitpid(pid, &status, 0);
        if (st->done || (WIFEXITED(status) && WEXITSTATUS(status) == 0)) {
            if (!WIFEXITED(status) || WEXITSTATUS(status) != 0)
                failures.push_back(std::string(s.name) + " " + mode_name + ": the sweep completed but its process " +
                                   (WIFEXITED(status) ? "exited with status " + std::to_string(WEXITSTATUS(status))
                                                      : std::string("was killed by a signal")));
            else if (!st->done && failures.empty())
                failures.push_back(std::string(s.name) + " " + mode_name + ": the sweep stopped before completing");
            break;
        }
        // Died in the middle: a crash, or a sanitizer's abort (its report is on stderr).
        // The first few are listed; the sweep goes on past up to max_crashes of them.
        constexpr int listed = 5, max_crashes = 40;
        const long at = st->at;
        ++crashes;
        if (crashes <= listed)
            failures.push_back(std::string(s.name) + " " + mode_name + ", allocation " + std::to_string(at) +
                               " failing: CRASH, " +
                               (WIFSIGNALED(status) ? "killed by signal " + std::to_string(WTERMSIG(status)) + " (" +
                                                          strsignal(WTERMSIG(status)) + ")"
                                                    : "exited with status " + std::to_string(WEXITSTATUS(status))) +
                               " (reproduce: GROUPFIT_OOM_REPRO=" + s.name + "," + mode_name + "," +
                               std::to_string(at) + ")");
        else
            more_crashes += (more_crashes.empty() ? "" : ", ") + std::to_string(at);
        if (crashes >= max_crashes) {
            failures.push_back(std::string(s.name) + " " + mode_name + ": stopped after " +
                               std::to_string(crashes) + " crashes");
            break;
        }
        start = at + 1;  // go on after the crash point (the next point of the sweep)
    }
    if (!more_crashes.empty())
        failures.push_back(std::string(s.name) + " " + mode_name + ": also crashed with allocation " + more_crashes +
                           " failing");
    sweep_counts c;
    c.points = st->points;
    c.cxx_points = st->cxx_points;
    c.load_failed = st->load_failed;
    c.nomem = st->nomem;
    c.absorbed = st->absorbed;
    c.total_allocs = st->full_run;
    munmap(mem, sizeof(shared_state));
    return c;
}

struct totals {
    long scenarios = 0, points = 0, cxx_points = 0;
};
totals grand_totals[2];

class Oom : public ::testing::TestWithParam<std::tuple<std::string, fault::mode>> {};

TEST_P(Oom, EveryAllocationPointFailsCleanly) {
    ASSERT_EQ(fault::install_rc, SQLITE_OK) << "SQLITE_CONFIG_MALLOC could not be installed";
    const auto& [name, m] = GetParam();
    std::vector<scenario> all = scenarios();
    auto it = std::find_if(all.begin(), all.end(), [&](const scenario& s) { return s.name == name; });
    ASSERT_NE(it, all.end());
    // To debug one failure point in this process (e.g. under gdb):
    //   GROUPFIT_OOM_REPRO=aggregate,transient,564 test_oom --gtest_filter='*aggregate_transient'
    if (const char* repro = std::getenv("GROUPFIT_OOM_REPRO")) {
        const std::string r = repro;
        const std::string mode_name = m == fault::mode::persistent ? "persistent" : "transient";
        const std::string prefix = name + "," + mode_name + ",";
        if (r.rfind(prefix, 0) != 0) GTEST_SKIP() << "GROUPFIT_OOM_REPRO names another scenario";
        std::string problem;
        const std::vector<outcome> ref = reference_of(*it, problem);
        ASSERT_TRUE(problem.empty()) << problem;
        sweep_counts c;
        long injected = 0;
        const std::string p = attempt(*it, ref, std::atol(r.c_str() + prefix.size()), m, c, injected);
        EXPECT_TRUE(p.empty()) << p;
        std::printf("[ oom      ] %s: %ld failures injected\n", repro, injected);
        return;
    }
    std::vector<std::string> failures;
    const sweep_counts c = sweep_isolated(*it, m, failures);
    for (const auto& f : failures) ADD_FAILURE() << f;
    std::printf("[ oom      ] %-12s %-10s %5ld allocation points survived (%ld in C++ operator new, %ld while "
                "loading the module, %ld statements failed with SQLITE_NOMEM or their own error, %ld failures of "
                "optional allocations absorbed); %ld allocations in a fault-free run\n",
                name.c_str(), m == fault::mode::persistent ? "persistent" : "transient", c.points, c.cxx_points,
                c.load_failed, c.nomem, c.absorbed, c.total_allocs);
    // Every point was failed: one per allocation of the fault-free run.
    if (failures.empty()) {
        EXPECT_EQ(c.points, c.total_allocs) << "allocation points failed vs allocations of a fault-free run";
    }
    // The sweep must really have failed allocations, SQLite's and the module's.
    EXPECT_GT(c.points, 10) << "no allocation point was exercised";
    EXPECT_GT(c.cxx_points, 0) << "no C++ allocation of the module was failed";
    if (it->armed_from == 0) {
        EXPECT_GT(c.load_failed, 0) << "loading the module was never failed";
    }
    EXPECT_GT(c.nomem, 0);
    if (failures.empty()) {
        auto& t = grand_totals[m == fault::mode::persistent];
        ++t.scenarios;
        t.points += c.points;
        t.cxx_points += c.cxx_points;
    }
}

std::vector<std::tuple<std::string, fault::mode>> all_params() {
    std::vector<std::tuple<std::string, fault::mode>> p;
    for (auto m : {fault::mode::transient, fault::mode::persistent})
        for (const auto& s : scenarios()) p.emplace_back(s.name, m);
    return p;
}

INSTANTIATE_TEST_SUITE_P(Scenarios, Oom, ::testing::ValuesIn(all_params()), [](const auto& info) {
    return std::get<0>(info.param) + (std::get<1>(info.param) == fault::mode::persistent ? "_persistent" : "_transient");
});

// ------------------------------------------------- the harness checks itself

int find_module(dl_phdr_info* info, std::size_t, void* data) {
    auto* want = static_cast<const char*>(data);
    if (!info->dlpi_name || !*info->dlpi_name) return 0;
    char* real = realpath(info->dlpi_name, nullptr);
    const bool match = real && std::strcmp(real, want) == 0;
    std::free(real);
    if (!match) return 0;
    std::uintptr_t lo = UINTPTR_MAX, hi = 0;
    for (int i = 0; i < info->dlpi_phnum; ++i) {
        const auto& ph = info->dlpi_phdr[i];
        if (ph.p_type != PT_LOAD || !(ph.p_flags & PF_X)) continue;
        lo = std::min<std::uintptr_t>(lo, info->dlpi_addr + ph.p_vaddr);
        hi = std::max<std::uintptr_t>(hi, info->dlpi_addr + ph.p_vaddr + ph.p_memsz);
    }
    fault::module_lo = lo;
    fault::module_hi = hi;
    return 1;
}

struct closer {
    void operator()(sqlite3* db) const { sqlite3_close(db); }
};

TEST(OomHarness, ModuleAllocatesThroughTheReplacedOperatorNew) {
    sqlite3* db = nullptr;
    ASSERT_EQ(sqlite3_open(":memory:", &db), SQLITE_OK);
    std::unique_ptr<sqlite3, closer> owner(db);  // closed on every way out (a leak would fail later sweeps)
    const outcome l = load_module(db, false);
    ASSERT_TRUE(l.ok()) << l.message;
    char* want = realpath(GROUPFIT_MODULE, nullptr);
    ASSERT_NE(want, nullptr);
    const int found = dl_iterate_phdr(find_module, want);
    std::free(want);
    ASSERT_EQ(found, 1) << GROUPFIT_MODULE << " is not mapped after loading";
    for (const auto& sql : setup())
        if (sql != load_statement) {
            ASSERT_TRUE(run(db, sql, false).ok()) << sql;
        }

    // SQLite itself never calls operator new; the groupfit calls do, from the module's code.
    fault::reset(0, fault::mode::transient);
    fault::cxx_calls_armed = 0;
    fault::cxx_calls_from_module = 0;
    outcome plain = run(db, "SELECT count(*) FROM t", true);
    ASSERT_TRUE(plain.ok());
    EXPECT_EQ(fault::cxx_calls_armed.load(), 0) << "operator new called by SQLite alone";
    outcome r = run(db, "SELECT * FROM groupfit_coef((SELECT groupfit(y, g, x) FROM t), 'coding=effect')", true);
    ASSERT_TRUE(r.ok()) << r.message;
    EXPECT_GT(fault::cxx_calls_armed.load(), 0) << "the module's allocations do not reach the replaced operator new";
    EXPECT_GT(fault::cxx_calls_from_module.load(), 0) << "no operator new call returned into groupfit.so";
    std::printf("[ oom      ] groupfit_coef over groupfit(): %ld operator new calls, %ld of them from groupfit.so code\n",
                fault::cxx_calls_armed.load(), fault::cxx_calls_from_module.load());

    // Failing only the module's first C++ allocation: SQLITE_NOMEM, not a crash.
    fault::reset(0, fault::mode::transient);
    run(db, "SELECT * FROM groupfit_summary((SELECT groupfit(y, g) FROM t))", true);
    const long allocs = fault::seen;
    bool saw_cxx_failure = false;
    for (long at = 1; at <= allocs && !saw_cxx_failure; ++at) {
        fault::reset(at, fault::mode::transient);
        outcome o = run(db, "SELECT * FROM groupfit_summary((SELECT groupfit(y, g) FROM t))", true);
        if (fault::first_failed_kind == 2) {
            saw_cxx_failure = true;
            EXPECT_EQ(o.rc, SQLITE_NOMEM) << o.message;
        }
    }
    fault::reset(0, fault::mode::transient);
    EXPECT_TRUE(saw_cxx_failure);
    EXPECT_EQ(sqlite3_close(owner.release()), SQLITE_OK);
}

// Failed allocations are told apart as the sweep needs (see "Optional
// allocations"): SQLite announces its benign-malloc regions through the hooks,
// and a failure inside one, or of a nothrow operator new, is optional; any
// other is required.
TEST(OomHarness, OptionalAllocationsAreRecognised) {
    ASSERT_EQ(fault::benign_hooks_rc, SQLITE_OK);
    sqlite3* db = nullptr;
    ASSERT_EQ(sqlite3_open(":memory:", &db), SQLITE_OK);
    std::unique_ptr<sqlite3, closer> owner(db);
    // A run-time error: sqlite3VdbeTransferError copies its message inside a benign region.
    const long regions = fault::benign_regions;
    const outcome o = run(db, "SELECT abs(-9223372036854775807 - 1)", false);
    EXPECT_EQ(o.rc, SQLITE_ERROR) << o.message;
    EXPECT_GT(fault::benign_regions.load(), regions) << "SQLite never announced a benign-malloc region";
    EXPECT_EQ(fault::benign_depth.load(), 0);

    fault::reset(1, fault::mode::persistent);
    fault::armed = true;
    fault::benign_begin();
    void* a = sqlite3_malloc(8);
    fault::benign_end();
    int* b = new (std::nothrow) int(1);
    const long required_so_far = fault::injected_required;
    void* c = sqlite3_malloc(8);
    bool threw = false;
    try {
        delete new int(2);
    } catch (const std::bad_alloc&) {
        threw = true;
    }
    fault::armed = false;
    EXPECT_EQ(a, nullptr);
    EXPECT_EQ(b, nullptr);
    EXPECT_EQ(c, nullptr);
    EXPECT_TRUE(threw);
    EXPECT_EQ(required_so_far, 0);
    EXPECT_EQ(fault::injected_required.load(), 2);
    EXPECT_EQ(fault::injected.load(), 4);
    fault::reset(0, fault::mode::transient);
    EXPECT_EQ(sqlite3_close(owner.release()), SQLITE_OK);
}

TEST(OomHarness, LiveCountersSeeBothAllocators) {
    const fault::snapshot a = fault::live();
    void* p = sqlite3_malloc(100);
    ASSERT_NE(p, nullptr);
    EXPECT_EQ(fault::live().sb, a.sb + 1);
    EXPECT_GE(fault::live().sbytes, a.sbytes + 100);
    auto* q = new std::vector<double>(1000);
    EXPECT_EQ(fault::live().cb, a.cb + 2);
    EXPECT_GE(fault::live().cbytes, a.cbytes + 8000);
    sqlite3_free(p);
    delete q;
    EXPECT_TRUE(fault::live() == a) << fault::describe(fault::live()) << " vs " << fault::describe(a);

    // Injection: the Nth allocation fails, for either allocator.
    fault::reset(2, fault::mode::transient);
    fault::armed = true;
    void* s1 = sqlite3_malloc(8);
    void* s2 = sqlite3_malloc(8);
    bool threw = false;
    int* c1 = nullptr;
    try {
        fault::fail_at = 3;
        c1 = new int(1);
    } catch (const std::bad_alloc&) {
        threw = true;
    }
    int* c2 = new (std::nothrow) int(2);  // allocation 4: not failed in transient mode
    fault::armed = false;
    EXPECT_NE(s1, nullptr);
    EXPECT_EQ(s2, nullptr);
    EXPECT_TRUE(threw);
    EXPECT_EQ(c1, nullptr);
    EXPECT_NE(c2, nullptr);
    sqlite3_free(s1);
    delete c2;
    fault::reset(0, fault::mode::transient);
}

// The results of one scenario reach the harness unchanged: a wrong row would
// be noticed (a comparison that cannot fail proves nothing).
TEST(OomHarness, ComparisonNoticesADifferentResult) {
    outcome a, b;
    a.rows = {{cell{SQLITE_FLOAT, std::string("\0\0\0\0\0\0\xf0\x3f", 8)}}};
    b = a;
    EXPECT_TRUE(same_outcome(a, b));
    b.rows[0][0].bytes[0] = 1;  // one ulp
    EXPECT_FALSE(same_outcome(a, b));
    b = a;
    b.rc = SQLITE_NOMEM;
    EXPECT_FALSE(same_outcome(a, b));
}

class Report : public ::testing::Environment {
public:
    void TearDown() override {
        for (int m = 0; m < 2; ++m)
            std::printf("[ oom      ] %s: %ld scenarios x allocation points = %ld survived (%ld in C++ operator new)\n",
                        m ? "persistent" : "transient", grand_totals[m].scenarios, grand_totals[m].points,
                        grand_totals[m].cxx_points);
    }
};
const auto* report_env = ::testing::AddGlobalTestEnvironment(new Report);

}  // namespace
