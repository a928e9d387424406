/* weft: error codes and messages shared by every module. */
#ifndef WEFT_ERROR_H
#define WEFT_ERROR_H

#include <stddef.h>

/** One code per kind of failure; callers branch on the code, people read the message. */
typedef enum weft_err {
    WEFT_OK = 0,
    WEFT_ERR_NOMEM,     /**< allocation failed or a size overflowed */
    WEFT_ERR_IO,        /**< a file could not be opened, read or written */
    WEFT_ERR_PARSE,     /**< input text is malformed (the message names file, line, field) */
    WEFT_ERR_INVALID,   /**< an argument or combination of inputs is not acceptable */
    WEFT_ERR_NOT_FOUND, /**< a named node, relation, version or blob does not exist */
    WEFT_ERR_CORRUPT,   /**< stored data fails its checksum or structure check */
    WEFT_ERR_STORE,     /**< LMDB reported an error (the message carries mdb_strerror) */
    WEFT_ERR_LIMIT      /**< a configured limit was reached (map full, too many items) */
} weft_err;

/** A code with its human-readable message. Owned by the caller, usually on the stack. */
typedef struct weft_error {
    weft_err code;
    char msg[256];
} weft_error;

/**
 * Short stable name of @p code: "ok", "nomem", "io", "parse", "invalid", "not_found",
 * "corrupt", "store", "limit". Never NULL; static storage.
 */
const char *weft_err_name(weft_err code);

/**
 * Fill @p e (may be NULL) with @p code and a printf-style message, truncated to fit.
 * @return @p code, so that `return weft_error_set(err, ...)` reads naturally.
 */
weft_err weft_error_set(weft_error *e, weft_err code, const char *fmt, ...)
    __attribute__((format(printf, 3, 4)));

/** Reset @p e (may be NULL) to WEFT_OK with an empty message. */
void weft_error_clear(weft_error *e);

#endif
