// groupfit core: the result tables behind the SQL table-valued functions.
//
// Each report is a `table`: column names and rows of values (NULL, integer,
// real or text). The SQLite layer only converts them; JSON output will reuse
// the same tables. Column names are snake_case and say what they hold.
#pragma once

#include <cstdint>
#include <string>
#include <variant>
#include <vector>

#include "fit.hpp"

namespace groupfit {

using value = std::variant<std::monostate, std::int64_t, double, std::string>;

struct table {
    std::vector<std::string> columns;
    std::vector<std::vector<value>> rows;
};

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
