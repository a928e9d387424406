/* Error codes and messages (include/weft/error.h). */
#include "weft/error.h"

#include <stdarg.h>
#include <stdio.h>

const char *weft_err_name(weft_err code)
{
    switch (code) {
    case WEFT_OK: return "ok";
    case WEFT_ERR_NOMEM: return "nomem";
    case WEFT_ERR_IO: return "io";
    case WEFT_ERR_PARSE: return "parse";
    case WEFT_ERR_INVALID: return "invalid";
    case WEFT_ERR_NOT_FOUND: return "not_found";
    case WEFT_ERR_CORRUPT: return "corrupt";
    case WEFT_ERR_STORE: return "store";
    case WEFT_ERR_LIMIT: return "limit";
    }
    return "unknown";
}

weft_err weft_error_set(weft_error *e, weft_err code, const char *fmt, ...)
{
    if (!e)
        return code;
    e->code = code;
    va_list ap;
    va_start(ap, fmt);
    vsnprintf(e->msg, sizeof e->msg, fmt, ap);
    va_end(ap);
    return code;
}

void weft_error_clear(weft_error *e)
{
    if (!e)
        return;
    e->code = WEFT_OK;
    e->msg[0] = '\0';
}
