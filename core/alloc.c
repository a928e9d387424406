/* Checked allocation (include/weft/alloc.h). */
#include "weft/alloc.h"

#include <stdint.h>
#include <stdlib.h>

void *weft_alloc_array(size_t n, size_t size)
{
    if (size && n > SIZE_MAX / size)
        return NULL;
    size_t bytes = n * size;
    return malloc(bytes ? bytes : 1);
}

void *weft_calloc_array(size_t n, size_t size)
{
    if (n == 0 || size == 0)
        return calloc(1, 1);
    return calloc(n, size);
}

int weft_grow_array(void **buf, size_t *cap, size_t need, size_t size)
{
    if (need <= *cap)
        return 0;
    size_t c = *cap ? *cap : 16;
    while (c < need) {
        if (c > SIZE_MAX / 2)
            return -1;
        c *= 2;
    }
    if (size && c > SIZE_MAX / size)
        return -1;
    void *p = realloc(*buf, c * size);
    if (!p)
        return -1;
    *buf = p;
    *cap = c;
    return 0;
}
