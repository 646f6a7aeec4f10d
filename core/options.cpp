#include "options.hpp"

#include <cctype>
#include <cmath>
#include <cstdlib>

#include "error.hpp"
#include "level.hpp"

namespace groupfit {

const char* coding_name(coding_kind k) {
    switch (k) {
    case coding_kind::dummy: return "dummy";
    case coding_kind::effect: return "effect";
    case coding_kind::weighted_effect: return "weighted_effect";
    case coding_kind::helmert: return "helmert";
    case coding_kind::reverse_helmert: return "reverse_helmert";
    case coding_kind::successive: return "successive";
    case coding_kind::polynomial: return "polynomial";
    case coding_kind::custom: return "custom";
    }
    return "?";
}

const char* adjust_name(adjust_kind k) {
    switch (k) {
    case adjust_kind::none: return "none";
    case adjust_kind::bonferroni: return "bonferroni";
    case adjust_kind::holm: return "holm";
    case adjust_kind::sidak: return "sidak";
    case adjust_kind::bh: return "bh";
    case adjust_kind::tukey: return "tukey";
    case adjust_kind::scheffe: return "scheffe";
    case adjust_kind::dunnett: return "dunnett";
    }
    return "?";
}

const char* side_name(side_kind k) {
    switch (k) {
    case side_kind::two_sided: return "two_sided";
    case side_kind::greater: return "greater";
    case side_kind::less: return "less";
    }
    return "?";
}

const char* terms_name(terms_kind k) {
    switch (k) {
    case terms_kind::full: return "full";
    case terms_kind::main: return "main";
    case terms_kind::two_way: return "two_way";
    }
    return "?";
}

const char* slopes_name(slopes_kind k) {
    switch (k) {
    case slopes_kind::common: return "common";
    case slopes_kind::separate: return "separate";
    case slopes_kind::cell: return "cell";
    }
    return "?";
}

const char* means_name(means_kind k) {
    switch (k) {
    case means_kind::equal: return "equal";
    case means_kind::proportional: return "proportional";
    }
    return "?";
}

const char* option_keys() {
    return "coding, base, order, conf, names, spacing, custom, ss, at, adjust, vs, side, terms, "
           "slopes, means, factor, by";
}

namespace detail {

static std::string_view trim(std::string_view s) {
    while (!s.empty() && std::isspace(static_cast<unsigned char>(s.front()))) s.remove_prefix(1);
    while (!s.empty() && std::isspace(static_cast<unsigned char>(s.back()))) s.remove_suffix(1);
    return s;
}

std::vector<std::string> split_list(std::string_view text, char sep, bool unquote, const char* what) {
    std::vector<std::string> out;
    std::string cur;
    bool quoted = false, was_quoted = false;
    auto finish = [&] {
        std::string item = was_quoted ? cur : std::string(trim(cur));
        out.push_back(std::move(item));
        cur.clear();
        was_quoted = false;
    };
    for (std::size_t i = 0; i < text.size(); ++i) {
        char c = text[i];
        if (quoted) {
            if (c == '"') {
                if (i + 1 < text.size() && text[i + 1] == '"') {
                    cur += '"';
                    if (!unquote) cur += '"';
                    ++i;
                } else {
                    quoted = false;
                    if (!unquote) cur += c;
                }
            } else {
                cur += c;
            }
        } else if (c == '"' && trim(cur).empty()) {
            quoted = true;
            if (unquote) {
                cur.clear();
                was_quoted = true;
            } else {
                cur += c;
            }
        } else if (c == sep) {
            finish();
        } else if (was_quoted) {
            if (!std::isspace(static_cast<unsigned char>(c)))
                throw error(what + std::string(": unexpected text after a closing quote near '") +
                            std::string(text.substr(i, 20)) + "'");
        } else {
            cur += c;
        }
    }
    if (quoted) throw error(what + std::string(": a double quote is not closed"));
    finish();
    return out;
}

}  // namespace detail

static double parse_number(std::string_view key, const std::string& v) {
    double x = 0;
    if (!parse_real(v, x))
        throw error("options: " + std::string(key) + " must be a number, not '" + v + "'");
    return x;
}

options parse_options(std::string_view text) {
    options o;
    std::vector<std::string> seen;
    for (const std::string& item : detail::split_list(text, ';', false)) {
        if (item.empty()) continue;
        auto eq = item.find('=');
        if (eq == std::string::npos)
            throw error("options: '" + item + "' is not key=value (keys: " + option_keys() + ")");
        std::string key(detail::trim(std::string_view(item).substr(0, eq)));
        for (auto& c : key) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
        std::string raw(detail::trim(std::string_view(item).substr(eq + 1)));
        for (const auto& s : seen)
            if (s == key) throw error("options: " + key + " is given twice");
        seen.push_back(key);
        auto single = [&] {
            auto v = detail::split_list(raw, '\0', true);
            return v.empty() ? std::string() : v[0];
        };
        if (key == "coding") {
            std::string v = single();
            static const coding_kind all[] = {
                coding_kind::dummy,           coding_kind::effect,     coding_kind::weighted_effect,
                coding_kind::helmert,         coding_kind::reverse_helmert,
                coding_kind::successive,      coding_kind::polynomial, coding_kind::custom};
            bool ok = false;
            for (auto k : all)
                if (v == coding_name(k)) o.coding = k, ok = true;
            if (!ok)
                throw error("options: coding must be one of dummy, effect, weighted_effect, "
                            "helmert, reverse_helmert, successive, polynomial, custom (not '" +
                            v + "')");
        } else if (key == "base") {
            o.base = single();
            o.has_base = true;
        } else if (key == "order") {
            o.order = detail::split_list(raw, ',', true);
            for (const auto& l : o.order)
                if (l.empty()) throw error("options: order has an empty level name");
        } else if (key == "conf") {
            o.conf = parse_number(key, single());
            if (!(o.conf > 0 && o.conf < 1))
                throw error("options: conf must be between 0 and 1, for example 0.95 (not '" +
                            raw + "')");
        } else if (key == "names") {
            o.names = detail::split_list(raw, ',', true);
            for (const auto& n : o.names)
                if (n.empty()) throw error("options: names has an empty name");
        } else if (key == "spacing") {
            std::string v = single();
            if (v == "equal") o.spacing = spacing_kind::equal;
            else if (v == "values") o.spacing = spacing_kind::values;
            else throw error("options: spacing must be one of equal, values (not '" + v + "')");
        } else if (key == "custom") {
            for (const auto& row : detail::split_list(raw, '/', false)) {
                std::vector<double> w;
                for (const auto& x : detail::split_list(row, ',', false))
                    w.push_back(parse_number("custom", x));
                o.custom.push_back(std::move(w));
            }
        } else if (key == "ss") {
            std::string v = single();
            if (v == "1") o.ss = 1;
            else if (v == "2") o.ss = 2;
            else if (v == "3") o.ss = 3;
            else throw error("options: ss must be one of 1, 2, 3 (not '" + v + "')");
        } else if (key == "at") {
            for (const auto& item : detail::split_list(raw, ',', false)) {
                const auto colon = item.rfind(':');
                if (colon == std::string::npos)
                    throw error("options: at takes covariate:value pairs, for example "
                                "at=distance_km:25, weight_kg:3 (not '" + item + "')");
                auto name = detail::split_list(std::string_view(item).substr(0, colon), '\0', true);
                const std::string value(detail::trim(std::string_view(item).substr(colon + 1)));
                o.at.emplace_back(name.empty() ? std::string() : name[0], parse_number("at", value));
            }
        } else if (key == "adjust") {
            std::string v = single();
            static const adjust_kind all[] = {adjust_kind::none, adjust_kind::bonferroni,
                                              adjust_kind::holm, adjust_kind::sidak,
                                              adjust_kind::bh,   adjust_kind::tukey,
                                              adjust_kind::scheffe, adjust_kind::dunnett};
            bool ok = false;
            for (auto k : all)
                if (v == adjust_name(k)) o.adjust = k, ok = true;
            if (!ok)
                throw error("options: adjust must be one of none, bonferroni, holm, sidak, bh, "
                            "tukey, scheffe, dunnett (not '" + v + "')");
            o.has_adjust = true;
        } else if (key == "vs") {
            o.vs = single();
            o.has_vs = true;
        } else if (key == "side") {
            std::string v = single();
            if (v == "two_sided") o.side = side_kind::two_sided;
            else if (v == "greater") o.side = side_kind::greater;
            else if (v == "less") o.side = side_kind::less;
            else throw error("options: side must be one of two_sided, greater, less (not '" + v + "')");
            o.has_side = true;
        } else if (key == "terms") {
            std::string v = single();
            if (v == "full") o.terms = terms_kind::full;
            else if (v == "main") o.terms = terms_kind::main;
            else if (v == "two_way") o.terms = terms_kind::two_way;
            else throw error("options: terms must be one of full, main, two_way (not '" + v + "')");
            o.has_terms = true;
        } else if (key == "slopes") {
            std::string v = single();
            if (v == "common") o.slopes = slopes_kind::common;
            else if (v == "separate") o.slopes = slopes_kind::separate;
            else if (v == "cell") o.slopes = slopes_kind::cell;
            else throw error("options: slopes must be one of common, separate, cell (not '" + v + "')");
        } else if (key == "means") {
            std::string v = single();
            if (v == "equal") o.means = means_kind::equal;
            else if (v == "proportional") o.means = means_kind::proportional;
            else throw error("options: means must be one of equal, proportional (not '" + v + "')");
            o.has_means = true;
        } else if (key == "factor") {
            o.factor = single();
            o.has_factor = true;
            if (o.factor.empty()) throw error("options: factor needs a factor name or cell");
        } else if (key == "by") {
            o.by = single();
            o.has_by = true;
            if (o.by.empty()) throw error("options: by needs a factor name");
        } else {
            throw error("options: unknown key '" + key + "' (keys: " + option_keys() + ")");
        }
    }
    if (o.coding == coding_kind::custom && o.custom.empty())
        throw error("options: coding=custom needs custom=w1,w2,... / w1,w2,... (one row of "
                    "weights over the levels per coefficient)");
    if (o.coding != coding_kind::custom && !o.custom.empty())
        throw error("options: custom= is used only with coding=custom");
    if (o.has_base && o.coding != coding_kind::dummy && o.coding != coding_kind::effect &&
        o.coding != coding_kind::weighted_effect)
        throw error("options: base= applies to the dummy, effect and weighted_effect codings, "
                    "not to " + std::string(coding_name(o.coding)));
    if (o.has_vs && !o.has_adjust) o.adjust = adjust_kind::dunnett;
    if (o.has_vs && (o.adjust == adjust_kind::tukey))
        throw error("options: adjust=tukey compares all pairs and cannot be combined with vs=; "
                    "for comparisons with a control use adjust=dunnett (or none, bonferroni, "
                    "holm, sidak, bh, scheffe)");
    if (!o.has_vs && o.adjust == adjust_kind::dunnett)
        throw error("options: adjust=dunnett compares every level with a control: name it with "
                    "vs=LEVEL");
    if (o.has_side && !o.has_vs)
        throw error("options: side= applies to comparisons with a control (vs=LEVEL)");
    if (o.has_side && o.adjust == adjust_kind::scheffe)
        throw error("options: side= is not available with adjust=scheffe (two-sided only)");
    return o;
}

}  // namespace groupfit
