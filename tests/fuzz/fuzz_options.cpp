// libFuzzer harness: the options text (core/options.cpp parse_options) and the
// fits it configures.
//
// The input is an options text such as 'coding=effect; base=b; adjust=holm'.
// parse_options may throw groupfit::error only. An accepted text is applied to
// each of the fixed models (fuzz_common.hpp: text levels a-d with covariates
// x1, x2; integer levels 1, 2, 4, 8; a weighted model with an aliased
// covariate), and every report is run: coding=, base=, order=, custom=,
// spacing= reach the coefficient table, at= the adjusted means, ss= the tests,
// adjust=, vs=, side= and conf= the pairwise comparisons. Only groupfit::error
// may come out, and every error of parse_options starts with "options: ".
#include <cstdint>
#include <string>
#include <string_view>

#include "fuzz_common.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
    const std::string_view text(reinterpret_cast<const char*>(data), size);
    groupfit::options o;
    try {
        o = groupfit::parse_options(text);
    } catch (const groupfit::error& e) {
        if (std::string_view(e.what()).substr(0, 9) != "options: ")
            gf_fuzz::finding(std::string("parse_options: an error does not say \"options: \": ") +
                             e.what());
        return 0;
    }
    for (const auto& m : gf_fuzz::fixed_models())
        gf_fuzz::attempt([&] {
            const groupfit::fit f(m.s, o);
            gf_fuzz::run_reports(f, m.s);
        });
    return 0;
}
