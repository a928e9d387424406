/* weft: checked allocation. */
#ifndef WEFT_ALLOC_H
#define WEFT_ALLOC_H

#include <stddef.h>

/**
 * malloc(n * size), or NULL when the product overflows or memory is short.
 * The memory is uninitialised; caller frees with free(). n == 0 returns a valid
 * pointer to at least one byte, so NULL always means failure.
 */
void *weft_alloc_array(size_t n, size_t size);

/** Like weft_alloc_array, but zero-filled (calloc). Caller frees. */
void *weft_calloc_array(size_t n, size_t size);

/**
 * Grow *@p buf to hold at least @p need elements of @p size bytes, doubling *@p cap.
 * On failure *@p buf and *@p cap are untouched and -1 is returned; 0 on success.
 */
int weft_grow_array(void **buf, size_t *cap, size_t need, size_t size);

#endif
