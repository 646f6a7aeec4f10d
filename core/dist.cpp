#include "dist.hpp"

#include <boost/math/distributions/fisher_f.hpp>
#include <boost/math/distributions/students_t.hpp>
#include <cmath>
#include <limits>

namespace groupfit::dist {

namespace {
namespace bm = boost::math;
// Errors become NaN results rather than exceptions; promotion to long double is
// kept (the default) for accuracy.
using policy = bm::policies::policy<bm::policies::domain_error<bm::policies::ignore_error>,
                                    bm::policies::overflow_error<bm::policies::ignore_error>,
                                    bm::policies::evaluation_error<bm::policies::ignore_error>>;
constexpr double nan = std::numeric_limits<double>::quiet_NaN();
}  // namespace

double t_two_sided_p(double t, double df) {
    if (!(df > 0) || std::isnan(t)) return nan;
    if (std::isinf(t)) return 0.0;
    bm::students_t_distribution<double, policy> d(df);
    return 2.0 * bm::cdf(bm::complement(d, std::fabs(t)));
}

double t_quantile(double q, double df) {
    if (!(df > 0) || !(q > 0 && q < 1)) return nan;
    // A report asks for the same quantile row after row (inference): the last
    // one is kept, per thread.
    thread_local double last_q = nan, last_df = nan, last = nan;
    if (q == last_q && df == last_df) return last;
    bm::students_t_distribution<double, policy> d(df);
    last = bm::quantile(d, q);
    last_q = q;
    last_df = df;
    return last;
}

double f_upper_p(double f, double df1, double df2) {
    if (!(df1 > 0) || !(df2 > 0) || std::isnan(f) || f < 0) return nan;
    if (std::isinf(f)) return 0.0;
    bm::fisher_f_distribution<double, policy> d(df1, df2);
    return bm::cdf(bm::complement(d, f));
}

double f_quantile(double q, double df1, double df2) {
    if (!(df1 > 0) || !(df2 > 0) || !(q > 0 && q < 1)) return nan;
    bm::fisher_f_distribution<double, policy> d(df1, df2);
    return bm::quantile(d, q);
}

}  // namespace groupfit::dist
