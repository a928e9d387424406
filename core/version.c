/* The version libweft was built as (include/weft/version.h). */
#include "weft/version.h"

const char *weft_version_string(void)
{
    return WEFT_VERSION;
}
