#include "report.hpp"

#include <algorithm>
#include <cmath>

#include "coding.hpp"
#include "factorial.hpp"
#include "dist.hpp"

namespace groupfit {

namespace {

value num(double v) { return std::isnan(v) ? value{} : value{v}; }
value integer(std::int64_t v) { return value{v}; }
value text(std::string s) { return value{std::move(s)}; }

/// estimate, std_error, t_stat, df, p_value, ci_lower, ci_upper for one estimate.
void inference(std::vector<value>& row, const estimate& e, double df, double conf) {
    const double t = e.value / e.std_error;
    const double q = dist::t_quantile(1.0 - (1.0 - conf) / 2.0, df);
    row.push_back(num(e.value));
    row.push_back(num(e.std_error));
    row.push_back(num(t));
    row.push_back(df > 0 ? num(df) : value{});
    row.push_back(num(dist::t_two_sided_p(t, df)));
    row.push_back(num(e.value - q * e.std_error));
    row.push_back(num(e.value + q * e.std_error));
}

std::string note_for(const estimate& e) {
    if (!e.estimable) return "not estimable: an aliased covariate confounds it";
    if (std::isnan(e.std_error)) return "no residual degrees of freedom: no standard error";
    return {};
}

value note_value(const std::string& s) { return s.empty() ? value{} : text(s); }

std::string covariates_at(const fit& f, const Eigen::VectorXd& at) {
    std::string s;
    for (int j = 0; j < f.covariates(); ++j)
        s += (j ? ", " : "") + f.covariate_name(j) + "=" + shortest_real(at[j]);
    return s;
}

}  // namespace

const std::vector<std::string>& coef_columns() {
    static const std::vector<std::string> c = {"term", "label", "compares", "estimate",
                                               "std_error", "t_stat", "df", "p_value",
                                               "ci_lower", "ci_upper", "note"};
    return c;
}
const std::vector<std::string>& levels_columns() {
    static const std::vector<std::string> c = {
        "term", "level", "position", "n", "weight_sum", "mean", "sd", "adjusted_mean",
        "std_error", "ci_lower", "ci_upper", "weighting", "covariates_at", "note"};
    return c;
}
const std::vector<std::string>& deviations_columns() {
    static const std::vector<std::string> c = {"level", "reference", "estimate", "std_error",
                                               "t_stat", "df", "p_value", "ci_lower",
                                               "ci_upper", "note"};
    return c;
}
const std::vector<std::string>& tests_columns() {
    static const std::vector<std::string> c = {
        "term", "method", "ss_type", "df", "df_denom", "sum_sq", "mean_sq", "f_stat",
        "p_value", "eta_sq", "partial_eta_sq", "omega_sq", "note"};
    return c;
}
const std::vector<std::string>& summary_columns() {
    static const std::vector<std::string> c = {
        "rows_used", "rows_dropped", "dropped_null_response", "dropped_null_group",
        "dropped_null_covariate", "dropped_null_weight", "dropped_zero_weight", "weight_sum",
        "levels", "covariates", "parameters", "rank", "aliased", "df_model", "df_resid",
        "r_squared", "adj_r_squared", "resid_sd", "f_stat", "p_value", "log_lik", "aic", "bic",
        "condition_number", "factors", "empty_cells", "empty_cell_labels", "model_form"};
    return c;
}

table coef_report(const fit& f) {
    table t{coef_columns(), {}};
    const coding cd(f);
    const Eigen::VectorXd zero = Eigen::VectorXd::Zero(f.covariates());
    const double df = f.df_resid(), conf = f.opts().conf;
    for (std::size_t i = 0; i < cd.size(); ++i) {
        const estimate e = f.evaluate(f.level_combination(cd.row(i), zero));
        std::vector<value> row = make_row(text(i == 0 ? "intercept" : f.group_name()), text(cd.label(i)),
                                          text(cd.compares(i)));
        inference(row, e, df, conf);
        row.push_back(note_value(note_for(e)));
        t.rows.push_back(std::move(row));
    }
    for (int j = 0; j < f.covariates(); ++j) {
        std::vector<value> row = make_row(text(f.covariate_name(j)), text("slope"),
                                          text("per unit of " + f.covariate_name(j)));
        if (f.aliased(j)) {
            for (int c = 0; c < 7; ++c) row.push_back(value{});
            row.push_back(text(f.alias_reason(j)));
        } else {
            const estimate e = f.evaluate(f.slope_function(j));
            inference(row, e, df, conf);
            row.push_back(note_value(note_for(e)));
        }
        t.rows.push_back(std::move(row));
    }
    return t;
}

table levels_report(const fit& f) {
    table t{levels_columns(), {}};
    const Eigen::VectorXd at = f.at_values();
    const double df = f.df_resid();
    const double q = dist::t_quantile(1.0 - (1.0 - f.opts().conf) / 2.0, df);
    for (std::size_t i = 0; i < f.levels(); ++i) {
        const estimate e = f.level_mean_at(i, at);
        t.rows.push_back(make_row(text(f.group_name()), text(f.level_label(i)),
                                  integer(std::int64_t(i + 1)), integer(f.level_rows(i)),
                                  num(f.level_weight(i)), num(f.level_mean(i)), num(f.level_sd(i)),
                                  num(e.value), num(e.std_error), num(e.value - q * e.std_error),
                                  num(e.value + q * e.std_error), value{},
                                  f.covariates() ? text(covariates_at(f, at)) : value{},
                                  note_value(note_for(e))));
    }
    return t;
}

table deviations_report(const fit& f) {
    table t{deviations_columns(), {}};
    const std::size_t L = f.levels();
    Eigen::VectorXd weights(L);
    for (std::size_t i = 0; i < L; ++i) weights[i] = f.level_weight(i);
    weights /= weights.sum();
    const Eigen::VectorXd uniform = Eigen::VectorXd::Constant(L, 1.0 / double(L));
    const std::vector<estimate> from_uniform = f.deviations_from(uniform);
    const std::vector<estimate> from_weights = f.deviations_from(weights);
    for (std::size_t i = 0; i < L; ++i) {
        for (int ref = 0; ref < 2; ++ref) {
            const estimate& e = ref == 0 ? from_uniform[i] : from_weights[i];
            std::vector<value> row = make_row(text(f.level_label(i)),
                                              text(ref == 0 ? "unweighted mean of level means"
                                                            : "weighted mean of level means"));
            inference(row, e, f.df_resid(), f.opts().conf);
            row.push_back(note_value(note_for(e)));
            t.rows.push_back(std::move(row));
        }
    }
    return t;
}

table tests_report(const fit& f) {
    table t{tests_columns(), {}};
    const double sse = f.sse(), dfr = f.df_resid();
    const double mse = f.sigma2();
    const double sst = f.ss_total();
    const int ss = f.opts().ss;
    auto term_row = [&](const std::string& term, double df, double ssv) {
        const double ms = ssv / df, fs = ms / mse;
        t.rows.push_back(make_row(text(term), text("f_test"), integer(ss), num(df), num(dfr), num(ssv),
                                  num(ms), num(fs), num(dist::f_upper_p(fs, df, dfr)), num(ssv / sst),
                                  num(ssv / (ssv + sse)), num((ssv - df * mse) / (sst + mse))));
    };
    const double L = double(f.levels());
    if (f.levels() > 1)
        term_row(f.group_name(), L - 1,
                 ss == 1 ? f.ss_group_unadjusted() : f.ss_group_adjusted());
    for (int j = 0; j < f.covariates(); ++j) {
        if (f.aliased(j)) {
            t.rows.push_back(make_row(text(f.covariate_name(j)), text("f_test"), integer(ss), num(0.0),
                                      num(dfr), value{}, value{}, value{}, value{}, value{}, value{},
                                      value{}));
            continue;
        }
        term_row(f.covariate_name(j), 1.0,
                 ss == 1 ? f.ss_covariate_sequential(j) : f.ss_covariate_partial(j));
    }
    const double dfm = double(f.rank() - 1);
    if (dfm > 0) {
        const double ssm = f.ss_model(), ms = ssm / dfm, fs = ms / mse;
        t.rows.push_back(make_row(text("model"), text("f_test"), value{}, num(dfm), num(dfr), num(ssm),
                                  num(ms), num(fs), num(dist::f_upper_p(fs, dfm, dfr)), num(ssm / sst),
                                  num(ssm / sst), num((ssm - dfm * mse) / (sst + mse))));
    }
    t.rows.push_back(make_row(text("residual"), value{}, value{}, num(dfr), value{}, num(sse), num(mse),
                              value{}, value{}, value{}, value{}, value{}));
    t.rows.push_back(make_row(text("total"), value{}, value{}, num(double(f.rows() - 1)), value{}, num(sst),
                              value{}, value{}, value{}, value{}, value{}, value{}));

    // Welch's heteroscedastic F for the grouping (no covariates, no weights).
    if (f.covariates() == 0 && f.levels() > 1 && !f.weighted()) {
        const std::size_t n = f.levels();
        double sw = 0, swm = 0;
        bool ok = true;  // every level needs two rows and a positive SD
        std::vector<double> w(n);
        for (std::size_t i = 0; i < n; ++i) {
            const double sd = f.level_sd(i);
            if (!(sd > 0) || f.level_rows(i) < 2) ok = false;
            w[i] = double(f.level_rows(i)) / (sd * sd);
        }
        value fw, df2, p;
        if (ok) {
            // Weighted mean relative to the first level's mean (exact offsets).
            const double m0 = f.level_mean(0);
            for (std::size_t i = 0; i < n; ++i) sw += w[i], swm += w[i] * (f.level_mean(i) - m0);
            const double mw = swm / sw;
            double a = 0, tmp = 0;
            for (std::size_t i = 0; i < n; ++i) {
                const double dv = (f.level_mean(i) - m0) - mw;
                a += w[i] * dv * dv;
                const double h = 1.0 - w[i] / sw;
                tmp += h * h / double(f.level_rows(i) - 1);
            }
            const double k = double(n);
            const double fval = (a / (k - 1)) / (1.0 + 2.0 * (k - 2) / (k * k - 1) * tmp);
            const double d2 = (k * k - 1) / (3.0 * tmp);
            fw = num(fval), df2 = num(d2), p = num(dist::f_upper_p(fval, k - 1, d2));
        }
        t.rows.push_back(make_row(text(f.group_name()), text("welch_f_test"), value{},
                                  num(double(n - 1)), std::move(df2), value{}, value{}, std::move(fw),
                                  std::move(p), value{}, value{},
                                  value{}));
    }
    for (auto& row : t.rows) row.resize(t.columns.size());
    // The grouping-by-covariate interaction: do the slopes differ by level?
    if (f.covariates() > 0 && f.levels() > 1) {
        std::vector<value> h = slopes_homogeneity_row(f);
        auto at = std::find_if(t.rows.begin(), t.rows.end(), [](const std::vector<value>& r) {
            const auto* term = std::get_if<std::string>(&r[0]);
            return term && (*term == "model" || *term == "residual");
        });
        t.rows.insert(at, std::move(h));
    }
    return t;
}

table summary_report(const fit& f, const summary& s) {
    table t{summary_columns(), {}};
    std::string aliased;
    for (int j = 0; j < f.covariates(); ++j)
        if (f.aliased(j)) aliased += (aliased.empty() ? "" : "; ") + f.alias_reason(j);
    const double n = double(f.rows());
    const double sse = f.sse(), sst = f.ss_total();
    const double dfm = double(f.rank() - 1), dfr = f.df_resid();
    const double r2 = f.ss_model() / sst;
    const double adj = dfr > 0 ? 1.0 - (1.0 - r2) * (n - 1) / dfr : NAN;
    const double fs = (f.ss_model() / dfm) / f.sigma2();
    double log_w = 0;
    for (std::size_t c = 0; c < s.cells(); ++c) log_w += s.cell_log_weight(c);
    const double ll = 0.5 * log_w - 0.5 * n * (std::log(2 * M_PI) + 1.0 - std::log(n) + std::log(sse));
    const double kpar = double(f.rank() + 1);
    t.rows.push_back(make_row(integer(s.rows_used()), integer(s.dropped_total()),
                              integer(s.dropped(drop_reason::null_response)),
                              integer(s.dropped(drop_reason::null_group)),
                              integer(s.dropped(drop_reason::null_covariate)),
                              integer(s.dropped(drop_reason::null_weight)),
                              integer(s.dropped(drop_reason::zero_weight)), num(f.weight_sum()),
                              integer(std::int64_t(f.levels())), integer(f.covariates()),
                              integer(f.parameters()), integer(f.rank()),
                              aliased.empty() ? value{} : text(aliased), num(dfm), num(dfr), num(r2),
                              num(adj), num(std::sqrt(f.sigma2())),
                              dfm > 0 ? num(fs) : value{},
                              dfm > 0 ? num(dist::f_upper_p(fs, dfm, dfr)) : value{},
                              num(ll), num(-2 * ll + 2 * kpar), num(-2 * ll + std::log(n) * kpar),
                              num(f.condition_number()), integer(1), integer(0), value{},
                              text("one factor; slopes=common")));
    return t;
}

}  // namespace groupfit
