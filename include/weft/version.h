/* weft: the release version, the one place it is written. The Makefile reads the three
 * numbers below for weft.pc and the man pages; `weft --version` prints WEFT_VERSION. */
#ifndef WEFT_VERSION_H
#define WEFT_VERSION_H

/* Semantic versioning: MAJOR changes break the API of include/weft/, MINOR ones add to it,
 * PATCH ones fix without changing it. */
#define WEFT_VERSION_MAJOR 0
#define WEFT_VERSION_MINOR 1
#define WEFT_VERSION_PATCH 0

#define WEFT_VERSION_STR_(x) #x
#define WEFT_VERSION_STR(x) WEFT_VERSION_STR_(x)
/** "MAJOR.MINOR.PATCH" of the headers being compiled against, e.g. "0.1.0". */
#define WEFT_VERSION                                                                          \
    WEFT_VERSION_STR(WEFT_VERSION_MAJOR) "." WEFT_VERSION_STR(WEFT_VERSION_MINOR) "."        \
        WEFT_VERSION_STR(WEFT_VERSION_PATCH)

/**
 * The version of the libweft actually linked, "MAJOR.MINOR.PATCH": differs from WEFT_VERSION
 * when a program was built against other headers than the library it runs with.
 * @return a static string; never NULL. Threads: safe. Cost: O(1).
 */
const char *weft_version_string(void);

#endif
