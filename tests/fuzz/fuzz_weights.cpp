// libFuzzer harness: the weights text of groupfit_contrast
// (core/compare.cpp contrast_report), e.g. 'a=1, b=-0.5, c=-0.5; a=1, d=-1'.
//
// The text is applied with default options to each of the fixed models
// (fuzz_common.hpp): text levels a-d with two covariates, integer levels
// 1, 2, 4, 8 without covariates, and a weighted model with an aliased
// covariate (so that "not estimable" is reachable). Only groupfit::error may
// come out, and an accepted text must give the contrast table's columns. With
// default options every error is about the weights text, so its message must
// say so: it starts with "weights: " (an unknown level once said "options:").
#include <cstdint>
#include <string>
#include <string_view>

#include "fuzz_common.hpp"

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
    const std::string_view text(reinterpret_cast<const char*>(data), size);
    const groupfit::options o{};
    for (const auto& m : gf_fuzz::fixed_models()) {
        const groupfit::fit f(m.s, o);
        try {
            gf_fuzz::check_table(groupfit::contrast_report(f, text), groupfit::contrast_columns(),
                                 "contrast_report");
        } catch (const groupfit::error& e) {
            if (std::string_view(e.what()).substr(0, 9) != "weights: ")
                gf_fuzz::finding(std::string("contrast_report: an error about the weights text "
                                             "does not say \"weights: \": ") + e.what());
        }
    }
    return 0;
}
