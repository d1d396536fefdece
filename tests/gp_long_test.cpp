// The GP likelihood check of gp_test.cpp at N = 2000 (every kernel against numpy +
// scipy.linalg.cho_factor of the same dense matrix, relative error <= 1e-8). Its own
// suite because numpy's dense Cholesky (Debian's reference LAPACK) takes seconds per
// matrix at this size: tens of seconds in all.
#include "gp_test_support.h"

TEST_SUITE("gp_long") {

TEST_CASE("gp: ln L of every kernel matches a dense scipy Cholesky, N = 2000") {
  apsides::gp_test::check_lnlike_against_scipy({2000}, "lnlike-2000");
}

}  // TEST_SUITE
