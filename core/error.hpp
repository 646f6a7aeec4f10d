// groupfit core: the one exception type of the numeric core.
//
// Messages are written for the SQL user who will read them through
// sqlite3_result_error: they name the argument or option at fault and, where
// there is a closed set of choices, list what is allowed.
#pragma once

#include <stdexcept>
#include <string>

namespace groupfit {

class error : public std::runtime_error {
public:
    explicit error(const std::string& message) : std::runtime_error(message) {}
};

}  // namespace groupfit
