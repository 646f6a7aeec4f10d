# groupfit_check_fma(<var>): sets <var> (cached) when the compiler accepts
# -mfma and the build machine's CPU has a correct fused multiply-add.
# Double-double arithmetic (core/ddouble.hpp) is several times faster with it;
# without it the portable Dekker product is used. Shared by the main build
# (CMakeLists.txt) and the fuzz build (tests/fuzz/CMakeLists.txt), which must
# make the same choice so that the fuzzers test what ships.
include(CheckCXXSourceRuns)
function(groupfit_check_fma var)
  set(CMAKE_REQUIRED_FLAGS "-mfma")
  check_cxx_source_runs([=[
    #include <cmath>
    int main() {
      __builtin_cpu_init();
      if (!__builtin_cpu_supports("fma")) return 1;
      volatile double a = 1.0 + 0x1p-30, b = 1.0 - 0x1p-30;
      return std::fma(a, b, -(a * b)) == 0.0 ? 1 : 0;
    }]=] ${var})
endfunction()
