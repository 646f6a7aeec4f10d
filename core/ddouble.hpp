// groupfit core: double-double arithmetic for the summary state and the fit.
//
// A value is an unevaluated sum hi + lo of two doubles with |lo| <= ulp(hi)/2,
// about 106 bits of significand. The algorithms are the error-free
// transformations of Knuth (two-sum), Dekker (1971, two-product by splitting)
// and the double-double operations built on them as described by Hida, Li and
// Bailey (2001, "Algorithms for quad-double precision floating point
// arithmetic"); written here in our own code. When the compiler targets a CPU
// with fused multiply-add (__FP_FAST_FMA / __FMA__), the product error comes
// from one fma instead of Dekker's split.
//
// Why: least-squares problems such as NIST's Wampler4/5 lose digits in
// proportion to the square of the design's condition number times the
// residual size; with every row folded in at 106 bits the summary and the fit
// return what the double input allows (see tests/core/test_nist.cpp).
#pragma once

#include <cmath>

namespace groupfit {

struct ddouble {
    double hi = 0.0, lo = 0.0;

    constexpr ddouble() = default;
    constexpr ddouble(double h) : hi(h), lo(0.0) {}  // NOLINT: implicit from double
    constexpr ddouble(double h, double l) : hi(h), lo(l) {}
    explicit operator double() const { return hi + lo; }
    double value() const { return hi + lo; }
};

namespace dd {

/// a + b = s + e exactly (Knuth).
inline ddouble two_sum(double a, double b) {
    const double s = a + b;
    const double bb = s - a;
    return {s, (a - (s - bb)) + (b - bb)};
}
/// a + b = s + e exactly when |a| >= |b| (Dekker).
inline ddouble quick_two_sum(double a, double b) {
    const double s = a + b;
    return {s, b - (s - a)};
}
/// a - b = s + e exactly.
inline ddouble two_diff(double a, double b) {
    const double s = a - b;
    const double bb = s - a;
    return {s, (a - (s - bb)) - (b + bb)};
}
/// a * b = p + e exactly (barring over/underflow).
inline ddouble two_prod(double a, double b) {
    const double p = a * b;
#if defined(__FMA__) || defined(FP_FAST_FMA)
    return {p, std::fma(a, b, -p)};
#else
    constexpr double split = 134217729.0;  // 2^27 + 1
    double t = split * a;
    const double ah = t - (t - a), al = a - ah;
    t = split * b;
    const double bh = t - (t - b), bl = b - bh;
    return {p, ((ah * bh - p) + ah * bl + al * bh) + al * bl};
#endif
}

}  // namespace dd

inline ddouble operator+(ddouble a, ddouble b) {
    // The "sloppy" sum: relative error about 2^-104 when a and b have the same
    // sign, and still bounded by 2^-104 |a| + 2^-104 |b| otherwise, which is all
    // a backward-stable accumulation needs.
    const ddouble s = dd::two_sum(a.hi, b.hi);
    return dd::quick_two_sum(s.hi, s.lo + (a.lo + b.lo));
}
inline ddouble operator-(ddouble a) { return {-a.hi, -a.lo}; }
inline ddouble operator-(ddouble a, ddouble b) { return a + (-b); }
inline ddouble operator*(ddouble a, ddouble b) {
    ddouble p = dd::two_prod(a.hi, b.hi);
    p.lo += a.hi * b.lo + a.lo * b.hi;
    return dd::quick_two_sum(p.hi, p.lo);
}
inline ddouble operator*(ddouble a, double b) {
    ddouble p = dd::two_prod(a.hi, b);
    p.lo += a.lo * b;
    return dd::quick_two_sum(p.hi, p.lo);
}
inline ddouble operator/(ddouble a, ddouble b) {
    // Long division with one correction step (about 2^-104 relative).
    const double q1 = a.hi / b.hi;
    const ddouble r = a - b * q1;
    return dd::quick_two_sum(q1, r.hi / b.hi);
}
inline ddouble& operator+=(ddouble& a, ddouble b) { return a = a + b; }
inline ddouble& operator-=(ddouble& a, ddouble b) { return a = a - b; }
inline ddouble& operator*=(ddouble& a, ddouble b) { return a = a * b; }
inline bool operator==(ddouble a, ddouble b) { return a.hi == b.hi && a.lo == b.lo; }
inline bool operator<(ddouble a, ddouble b) { return a.hi < b.hi || (a.hi == b.hi && a.lo < b.lo); }
inline ddouble sqrt(ddouble a) {
    if (!(a.hi > 0)) return ddouble(a.hi == 0 ? 0.0 : std::sqrt(a.hi));
    const double x = std::sqrt(a.hi);  // one Newton step: x + (a - x^2) / (2x)
    const ddouble r = a - dd::two_prod(x, x);
    return dd::quick_two_sum(x, r.hi / (2.0 * x));
}
inline ddouble fabs(ddouble a) { return a.hi < 0 ? -a : a; }

}  // namespace groupfit
