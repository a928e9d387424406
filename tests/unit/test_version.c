/* The version string, checked against the three numbers it is made of, printed here with
 * snprintf rather than by the preprocessor. */
#include <criterion/criterion.h>
#include <stdio.h>

#include "weft/version.h"

Test(version, string_matches_numbers)
{
    char expect[32];
    snprintf(expect, sizeof expect, "%d.%d.%d", WEFT_VERSION_MAJOR, WEFT_VERSION_MINOR,
             WEFT_VERSION_PATCH);
    cr_assert_str_eq(WEFT_VERSION, expect);
    cr_assert_str_eq(weft_version_string(), expect);
}
