/* A program for tests/cli/harness_selftest.sh: one case that passes, one whose checks all fail on purpose, so the
 * self-test can see what tests/harness.h prints and returns. Not a test of bandlink itself. */
#include "harness.h"

HARNESS_CASE(passing)
{
    check_rel(0.1 + 0.2, 0.3, 1e-15, "0.1 + 0.2 = 0.3 within one rounding");
    check_abs(1.0 / 3.0, 0.3333, 1e-4, "1/3 to four places");
    check_int(7 * 6, 42, "7 x 6");
    check_str("band", "band", "equal strings");
    check_true(2 > 1, "a condition");
}

HARNESS_CASE(failing)
{
    double third = 1.0 / 3.0;
    check_rel(third, 0.3, 1e-3, "a relative check that fails");
    check_abs(third, 0.3, 1e-3, "an absolute check that fails");
    check_int(7 * 6, 41, "an integer check that fails");
    check_str("band", "bands", "a string check that fails");
    check_true(third > 1, "a condition that fails");
}

int main(int argc, char **argv)
{
    static const harness_case cases[] = {
        HARNESS_ENTRY(passing),
        HARNESS_ENTRY(failing),
    };
    return harness_main(argc, argv, cases, HARNESS_COUNT(cases));
}
