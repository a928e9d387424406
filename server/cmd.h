/* The weft binary's subcommands and the small helpers they share. Not part of libweft. */
#ifndef WEFT_SERVER_CMD_H
#define WEFT_SERVER_CMD_H

#include <stdbool.h>
#include <stddef.h>
#include <stdint.h>

#include "weft/error.h"

/** Exit statuses of every subcommand. */
enum { CMD_OK = 0, CMD_FAIL = 1, CMD_USAGE = 2 };

/* Each subcommand gets argv with argv[0] = the subcommand name and returns an exit status. */
int cmd_inspect_main(int argc, char **argv);
int cmd_train_main(int argc, char **argv);
int cmd_serve_main(int argc, char **argv);

/** Print "weft: <err->msg>" on stderr; returns CMD_FAIL. */
int cmd_report_error(const weft_error *err);

/** Print "weft <sub>: <message>" and a pointer to --help on stderr; returns CMD_USAGE. */
int cmd_usage_error(const char *sub, const char *fmt, ...) __attribute__((format(printf, 2, 3)));

/**
 * Parse @p text as a whole decimal integer in [min, max] for option @p flag.
 * @return true and *out on success; false after printing a usage error.
 */
bool cmd_parse_u64(const char *sub, const char *flag, const char *text, uint64_t min,
                   uint64_t max, uint64_t *out);

/** Parse @p text as a finite number in [min, max] for option @p flag (same contract). */
bool cmd_parse_double(const char *sub, const char *flag, const char *text, double min,
                      double max, double *out);

/**
 * Option scanner for "--name value" and "--name=value" forms. Returns the value of option
 * @p name at argv[*i] (advancing *i past a separate value), or NULL when argv[*i] is not
 * that option. A missing value prints a usage error and sets *@p bad.
 */
const char *cmd_opt_value(const char *sub, int argc, char **argv, int *i, const char *name,
                          bool *bad);

#endif
