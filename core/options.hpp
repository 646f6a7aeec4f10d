// groupfit core: the options text shared by every report function.
//
// Grammar: `key=value` pairs separated by `;`, for example
//   'coding=effect; base=c003; conf=0.99; names=carrier, distance_km'.
// Keys are case-insensitive; surrounding spaces are ignored. A list value is
// separated by `,`; a level label that contains `,` `;` `=` or leading spaces
// may be written in double quotes ("a;b"), with "" for a quote inside.
// Unknown keys, repeated keys and bad values are errors that list what is
// allowed.
#pragma once

#include <string>
#include <string_view>
#include <vector>

namespace groupfit {

enum class coding_kind {
    dummy,
    effect,
    weighted_effect,
    helmert,
    reverse_helmert,
    successive,
    polynomial,
    custom,
};
const char* coding_name(coding_kind k);

enum class spacing_kind { equal, values };

/// Multiplicity adjustment of groupfit_pairs.
enum class adjust_kind { none, bonferroni, holm, sidak, bh, tukey, scheffe, dunnett };
const char* adjust_name(adjust_kind k);

/// Alternative of a many-to-one comparison (treatment minus control).
enum class side_kind { two_sided, greater, less };
const char* side_name(side_kind k);

/// Terms of a crossed model, chosen after the data pass.
enum class terms_kind { full, main, two_way };
const char* terms_name(terms_kind k);

/// How covariate slopes vary: one slope each, by level of the first factor, or by cell.
enum class slopes_kind { common, separate, cell };
const char* slopes_name(slopes_kind k);

/// Weighting of cells in a marginal mean of a crossed model.
enum class means_kind { equal, proportional };
const char* means_name(means_kind k);

struct options {
    coding_kind coding = coding_kind::dummy;
    std::string base;                          // empty: the coding's default level
    bool has_base = false;
    std::vector<std::string> order;            // levels to put first, in this order
    double conf = 0.95;                        // confidence level of every interval
    std::vector<std::string> names;            // grouping, then covariates
    spacing_kind spacing = spacing_kind::equal;
    std::vector<std::vector<double>> custom;   // rows of custom weights over levels
    int ss = 3;                                // sums-of-squares type 1, 2 or 3
    std::vector<std::pair<std::string, double>> at;  // covariate name -> value
    adjust_kind adjust = adjust_kind::tukey;   // pairs: tukey, or dunnett with vs=
    bool has_adjust = false;
    std::string vs;                            // pairs: the control level
    bool has_vs = false;
    side_kind side = side_kind::two_sided;
    bool has_side = false;
    // Crossed factors and slopes.
    terms_kind terms = terms_kind::full;
    bool has_terms = false;
    slopes_kind slopes = slopes_kind::common;
    means_kind means = means_kind::equal;
    bool has_means = false;
    std::string factor;                        // pairs/contrast: whose means (a factor name, or "cell")
    bool has_factor = false;
    std::string by;                            // pairs: simple effects within levels of this factor
    bool has_by = false;
};

/// Parses an options text. Throws groupfit::error with a message that names the
/// key and lists the allowed keys or values.
options parse_options(std::string_view text);

/// The list of allowed keys, for messages and docs.
const char* option_keys();

namespace detail {
/// Splits on `sep` outside double quotes; trims spaces; unquotes items. Errors
/// (an open quote, text after a closing quote) start with `what` and ": ".
std::vector<std::string> split_list(std::string_view text, char sep, bool unquote,
                                    const char* what = "options");
}  // namespace detail

}  // namespace groupfit
