// groupfit core: the result tables behind the SQL table-valued functions.
//
// Each report is a `table`: column names and rows of values (NULL, integer,
// real or text). The SQLite layer only converts them; JSON output will reuse
// the same tables. Column names are snake_case and say what they hold.
#pragma once

#include <cstdint>
#include <string>
#include <type_traits>
#include <utility>
#include <variant>
#include <vector>

#include "fit.hpp"

namespace groupfit {

using value = std::variant<std::monostate, std::int64_t, double, std::string>;

struct table {
    std::vector<std::string> columns;
    std::vector<std::vector<value>> rows;
};

/// A row made by moving the values in. Rows are never built from a braced
/// list: that copies every value, and with libstdc++ 12 a std::variant copy
/// whose std::string copy throws std::bad_alloc then destroys an alternative it
/// never made (undefined behaviour, found by the out-of-memory test under
/// UBSan). Moving a value never throws; only rvalues are accepted.
template <class... V>
std::vector<value> make_row(V&&... v) {
    static_assert((!std::is_lvalue_reference_v<V> && ...), "make_row moves its values: pass rvalues");
    std::vector<value> row;
    row.reserve(sizeof...(V));
    (row.emplace_back(std::move(v)), ...);
    return row;
}

/// Column lists, fixed per report (the SQL schema is built from them).
const std::vector<std::string>& coef_columns();
const std::vector<std::string>& levels_columns();
const std::vector<std::string>& deviations_columns();
const std::vector<std::string>& tests_columns();
const std::vector<std::string>& summary_columns();

/// One row per coefficient of the chosen coding, then one per covariate slope.
table coef_report(const fit& f);
/// One row per level: observed n, mean, SD; adjusted mean at the covariate means.
table levels_report(const fit& f);
/// Two rows per level: vs the unweighted mean of level means, and vs the
/// weight-sum-weighted mean of level means.
table deviations_report(const fit& f);
/// The analysis-of-variance table, plus Welch's F when it applies.
table tests_report(const fit& f);
/// One row: row accounting, rank, fit statistics.
table summary_report(const fit& f, const summary& s);

}  // namespace groupfit
