// The built extension (groupfit.so) used from many threads at once, each with
// its own connection, as a server with a connection per request would use it.
//
// Every thread opens a :memory: connection, loads the module, builds the same
// deterministic table and then, several times over, computes a fixed workload:
// groupfit and groupfit_weighted models, per-segment models merged with
// groupfit_merge, and every report (coef, levels, deviations, tests, summary,
// pairs with Tukey, Dunnett by product form and by quasi-Monte Carlo,
// contrast) of those models. The extension keeps per-thread caches
// (core/multcomp.cpp) and per-connection settings; sharing any state between
// threads by mistake shows up as a difference. So every thread, in every
// round, must produce exactly the bytes the main thread produced alone before
// the threads started: identical model BLOBs and identical report rows (reals
// compared bit for bit).
#include <gtest/gtest.h>
#include <sqlite3.h>

#include <cstdint>
#include <cstdio>
#include <cstring>
#include <latch>
#include <stdexcept>
#include <string>
#include <thread>
#include <vector>

#ifndef GROUPFIT_MODULE
#error "GROUPFIT_MODULE (path of the built groupfit.so) must be defined"
#endif

namespace {

constexpr int thread_count = 8;
constexpr int rounds = 2;

/// Everything one workload produced, as text that is equal exactly when the
/// results are bit-for-bit equal (reals as their 64-bit patterns, BLOBs in hex).
struct transcript {
    std::vector<std::string> lines;
    std::string error;  // the first failure, if any (then lines are incomplete)
};

std::string hex(const void* p, int n) {
    static const char digits[] = "0123456789abcdef";
    std::string s;
    const auto* b = static_cast<const unsigned char*>(p);
    for (int i = 0; i < n; ++i) s += digits[b[i] >> 4], s += digits[b[i] & 15];
    return s;
}

std::string cell_text(sqlite3_stmt* st, int c) {
    switch (sqlite3_column_type(st, c)) {
    case SQLITE_INTEGER: return "i" + std::to_string(sqlite3_column_int64(st, c));
    case SQLITE_FLOAT: {
        const double d = sqlite3_column_double(st, c);
        std::uint64_t bits;
        std::memcpy(&bits, &d, sizeof bits);
        char b[64];
        std::snprintf(b, sizeof b, "r%016llx(%.17g)", static_cast<unsigned long long>(bits), d);
        return b;
    }
    case SQLITE_TEXT:
        return "t'" + std::string(reinterpret_cast<const char*>(sqlite3_column_text(st, c)),
                                  sqlite3_column_bytes(st, c)) + "'";
    case SQLITE_BLOB: return "x'" + hex(sqlite3_column_blob(st, c), sqlite3_column_bytes(st, c)) + "'";
    default: return "NULL";
    }
}

class connection {
public:
    connection() {
        if (sqlite3_open(":memory:", &db_) != SQLITE_OK) throw std::runtime_error("open failed");
        sqlite3_enable_load_extension(db_, 1);
        char* err = nullptr;
        if (sqlite3_load_extension(db_, GROUPFIT_MODULE, nullptr, &err) != SQLITE_OK) {
            std::string msg = err ? err : "?";
            sqlite3_free(err);
            throw std::runtime_error("cannot load " GROUPFIT_MODULE ": " + msg);
        }
    }
    ~connection() { sqlite3_close(db_); }
    connection(const connection&) = delete;
    connection& operator=(const connection&) = delete;

    void exec(const std::string& sql) {
        char* err = nullptr;
        if (sqlite3_exec(db_, sql.c_str(), nullptr, nullptr, &err) != SQLITE_OK) {
            std::string msg = err ? err : "?";
            sqlite3_free(err);
            throw std::runtime_error(sql + ": " + msg);
        }
    }
    /// Every row of a statement, one line per row; `model` is bound as ?1.
    void query(transcript& out, const std::string& sql, const std::string* model = nullptr) {
        sqlite3_stmt* st = nullptr;
        if (sqlite3_prepare_v2(db_, sql.c_str(), -1, &st, nullptr) != SQLITE_OK)
            throw std::runtime_error(sql + ": " + sqlite3_errmsg(db_));
        if (model) sqlite3_bind_blob(st, 1, model->data(), static_cast<int>(model->size()), SQLITE_STATIC);
        out.lines.push_back("-- " + sql);
        int rc;
        while ((rc = sqlite3_step(st)) == SQLITE_ROW) {
            std::string line;
            for (int c = 0; c < sqlite3_column_count(st); ++c) line += (c ? " | " : "") + cell_text(st, c);
            out.lines.push_back(std::move(line));
        }
        const std::string msg = sqlite3_errmsg(db_);
        sqlite3_finalize(st);
        if (rc != SQLITE_DONE) throw std::runtime_error(sql + ": " + msg);
    }
    /// The one BLOB a statement returns.
    std::string model(const std::string& sql) {
        sqlite3_stmt* st = nullptr;
        if (sqlite3_prepare_v2(db_, sql.c_str(), -1, &st, nullptr) != SQLITE_OK)
            throw std::runtime_error(sql + ": " + sqlite3_errmsg(db_));
        std::string blob;
        if (sqlite3_step(st) == SQLITE_ROW && sqlite3_column_type(st, 0) == SQLITE_BLOB)
            blob.assign(static_cast<const char*>(sqlite3_column_blob(st, 0)), sqlite3_column_bytes(st, 0));
        const std::string msg = sqlite3_errmsg(db_);
        sqlite3_finalize(st);
        if (blob.empty()) throw std::runtime_error(sql + ": no model BLOB (" + msg + ")");
        return blob;
    }

private:
    sqlite3* db_ = nullptr;
};

/// 120 rows: five unbalanced levels (text and integer), two covariates,
/// positive weights; values from a fixed linear congruential stream.
void build_table(connection& db) {
    db.exec("CREATE TABLE t(id INTEGER PRIMARY KEY, g, y REAL, x1 REAL, x2 REAL, w REAL)");
    std::uint64_t s = 12345;
    auto next = [&] {
        s = s * 6364136223846793005ull + 1442695040888963407ull;
        return double(s >> 11) * 0x1p-53;
    };
    const char* levels[] = {"'north'", "'south'", "'east'", "'west'", "7"};
    std::string sql = "INSERT INTO t(g, y, x1, x2, w) VALUES ";
    for (int i = 0; i < 120; ++i) {
        const int g = (i % 7) % 5;  // levels 0 and 1 twice as frequent
        const double x1 = 10 + 20 * next(), x2 = next() - 0.5;
        const double y = 5 + 1.5 * g + 0.3 * x1 - 2 * x2 + (1 + g) * next();
        char row[200];
        std::snprintf(row, sizeof row, "%s(%s, %.17g, %.17g, %.17g, %.17g)", i ? ", " : "", levels[g], y,
                      x1, x2, 0.5 + next());
        sql += row;
    }
    db.exec(sql);
}

/// The workload; appends everything it computed to `out`.
void workload(connection& db, transcript& out) {
    const std::string m = db.model("SELECT groupfit(y, g, x1, x2) FROM t");
    const std::string m0 = db.model("SELECT groupfit(y, g) FROM t");
    const std::string mw = db.model("SELECT groupfit_weighted(w, y, g, x1) FROM t");
    const std::string merged = db.model(
        "SELECT groupfit_merge(s) FROM (SELECT groupfit(y, g, x1, x2) AS s FROM t GROUP BY id % 4)");
    out.lines.push_back("model " + hex(m.data(), static_cast<int>(m.size())));
    out.lines.push_back("model0 " + hex(m0.data(), static_cast<int>(m0.size())));
    out.lines.push_back("weighted " + hex(mw.data(), static_cast<int>(mw.size())));
    out.lines.push_back("merged " + hex(merged.data(), static_cast<int>(merged.size())));
    for (const std::string* model : {&m, &mw, &merged}) {
        db.query(out, "SELECT * FROM groupfit_coef(?1, 'coding=effect; names=region, d')", model);
        db.query(out, "SELECT * FROM groupfit_coef(?1, 'coding=helmert')", model);
        db.query(out, "SELECT * FROM groupfit_levels(?1)", model);
        db.query(out, "SELECT * FROM groupfit_deviations(?1)", model);
        db.query(out, "SELECT * FROM groupfit_tests(?1, 'ss=2')", model);
        db.query(out, "SELECT * FROM groupfit_summary(?1)", model);
        db.query(out, "SELECT * FROM groupfit_pairs(?1)", model);  // Tukey
        db.query(out, "SELECT * FROM groupfit_pairs(?1, 'adjust=holm')", model);
        db.query(out, "SELECT * FROM groupfit_contrast(?1, 'north=1, south=-1; east=1, west=-1, 7=0')",
                 model);
    }
    // Dunnett with covariates: randomized quasi-Monte Carlo from a fixed seed
    // (about half a second of CPU, so once per workload).
    db.query(out, "SELECT * FROM groupfit_pairs(?1, 'vs=north')", &m);
    // Without covariates: Welch's test and Dunnett's product-form integral.
    db.query(out, "SELECT * FROM groupfit_tests(?1)", &m0);
    db.query(out, "SELECT * FROM groupfit_pairs(?1, 'vs=7; side=greater')", &m0);
    db.query(out, "SELECT * FROM groupfit_pairs(?1, 'adjust=scheffe; conf=0.99')", &m0);
    db.query(out, "SELECT * FROM groupfit_coef(?1, 'coding=polynomial')", &m0);
    // Models made and reported in one statement, per segment.
    db.query(out,
             "SELECT s.k, c.label, c.estimate, c.std_error FROM (SELECT id % 3 AS k, "
             "groupfit(y, g, x1) AS model FROM t GROUP BY k) AS s, groupfit_coef(s.model) AS c");
}

transcript run_rounds(int n) {
    transcript first;
    try {
        connection db;
        build_table(db);
        for (int r = 0; r < n; ++r) {
            transcript t;
            workload(db, t);
            if (r == 0) {
                first = std::move(t);
            } else if (t.lines != first.lines) {
                first.error = "round " + std::to_string(r + 1) + " differs from round 1 on the same connection";
                break;
            }
        }
    } catch (const std::exception& e) {
        first.error = e.what();
    }
    return first;
}

/// The first line where two transcripts differ, for the failure message.
std::string first_difference(const transcript& a, const transcript& b) {
    const std::size_t n = std::min(a.lines.size(), b.lines.size());
    for (std::size_t i = 0; i < n; ++i)
        if (a.lines[i] != b.lines[i]) {
            std::string query;  // the statement the line belongs to
            for (std::size_t j = i + 1; j-- > 0;)
                if (a.lines[j].rfind("-- ", 0) == 0) {
                    query = a.lines[j];
                    break;
                }
            return "line " + std::to_string(i + 1) + " (" + query + ")\n  expected: " +
                   a.lines[i].substr(0, 600) + "\n  got:      " + b.lines[i].substr(0, 600);
        }
    return "lengths " + std::to_string(a.lines.size()) + " vs " + std::to_string(b.lines.size());
}

TEST(Threads, EveryThreadGetsTheSingleThreadedResultsExactly) {
    const transcript reference = run_rounds(1);
    ASSERT_TRUE(reference.error.empty()) << reference.error;
    ASSERT_GT(reference.lines.size(), 200u);  // the workload really produced rows

    std::vector<transcript> results(thread_count);
    std::latch start(thread_count);
    std::vector<std::thread> threads;
    for (int i = 0; i < thread_count; ++i)
        threads.emplace_back([&, i] {
            start.arrive_and_wait();  // every thread loads and fits at the same time
            results[i] = run_rounds(rounds);
        });
    for (auto& t : threads) t.join();

    for (int i = 0; i < thread_count; ++i) {
        SCOPED_TRACE("thread " + std::to_string(i + 1));
        EXPECT_TRUE(results[i].error.empty()) << results[i].error;
        if (results[i].error.empty()) {
            EXPECT_TRUE(results[i].lines == reference.lines)
                << "differs from the single-threaded run at " << first_difference(reference, results[i]);
        }
    }
}

TEST(Threads, LimitsArePerConnectionUnderConcurrency) {
    // Each thread sets its own level cap and must see only its own value, and
    // the cap must act on its own connection only.
    std::vector<std::string> errors(thread_count);
    std::latch start(thread_count);
    std::vector<std::thread> threads;
    for (int i = 0; i < thread_count; ++i)
        threads.emplace_back([&, i] {
            try {
                connection db;
                build_table(db);
                start.arrive_and_wait();
                const int cap = i % 2 ? 4 : 5;  // 5 levels in t: odd threads must fail
                for (int r = 0; r < 20; ++r) {
                    transcript t;
                    db.query(t, "SELECT groupfit_limit('levels', " + std::to_string(cap) + ")");
                    db.query(t, "SELECT groupfit_limit('levels')");
                    if (t.lines.back() != "i" + std::to_string(cap))
                        throw std::runtime_error("read back " + t.lines.back() + ", set " +
                                                 std::to_string(cap));
                    bool failed = false;
                    try {
                        db.model("SELECT groupfit(y, g) FROM t");
                    } catch (const std::runtime_error& e) {
                        failed = std::strstr(e.what(), "too many levels") != nullptr;
                        if (!failed) throw;
                    }
                    if (failed != (cap == 4))
                        throw std::runtime_error(std::string("cap ") + std::to_string(cap) +
                                                 (failed ? " rejected" : " accepted") + " 5 levels");
                }
            } catch (const std::exception& e) {
                errors[i] = e.what();
            }
        });
    for (auto& t : threads) t.join();
    for (int i = 0; i < thread_count; ++i) EXPECT_EQ(errors[i], "") << "thread " << i + 1;
}

}  // namespace
