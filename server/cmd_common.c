/* Helpers shared by the subcommands: error printing and strict option parsing. */
#include "cmd.h"

#include <errno.h>
#include <math.h>
#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <unistd.h>

int cmd_report_error(const weft_error *err)
{
    fprintf(stderr, "weft: %s\n", err->msg[0] ? err->msg : weft_err_name(err->code));
    return CMD_FAIL;
}

int cmd_usage_error(const char *sub, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    fprintf(stderr, "weft %s: ", sub);
    vfprintf(stderr, fmt, ap);
    fprintf(stderr, "\n(see 'weft %s --help')\n", sub);
    va_end(ap);
    return CMD_USAGE;
}

bool cmd_parse_u64(const char *sub, const char *flag, const char *text, uint64_t min,
                   uint64_t max, uint64_t *out)
{
    char *end = NULL;
    errno = 0;
    unsigned long long v = (text[0] >= '0' && text[0] <= '9') ? strtoull(text, &end, 10) : 0;
    if (!end || *end != '\0' || errno == ERANGE || v < min || v > max) {
        cmd_usage_error(sub, "%s: '%s' is not a whole number from %llu to %llu", flag, text,
                        (unsigned long long)min, (unsigned long long)max);
        return false;
    }
    *out = v;
    return true;
}

bool cmd_parse_double(const char *sub, const char *flag, const char *text, double min,
                      double max, double *out)
{
    char *end = NULL;
    errno = 0;
    double v = strtod(text, &end);
    if (end == text || *end != '\0' || errno == ERANGE || !isfinite(v) || v < min || v > max) {
        cmd_usage_error(sub, "%s: '%s' is not a number from %g to %g", flag, text, min, max);
        return false;
    }
    *out = v;
    return true;
}

const char *cmd_opt_value(const char *sub, int argc, char **argv, int *i, const char *name,
                          bool *bad)
{
    const char *arg = argv[*i];
    size_t n = strlen(name);
    if (strncmp(arg, name, n) != 0)
        return NULL;
    if (arg[n] == '=')
        return arg + n + 1;
    if (arg[n] != '\0')
        return NULL;
    if (*i + 1 >= argc) {
        cmd_usage_error(sub, "%s needs a value", name);
        *bad = true;
        return NULL;
    }
    *i += 1;
    return argv[*i];
}

size_t cmd_online_cpus(void)
{
    long n = sysconf(_SC_NPROCESSORS_ONLN);
    return n > 0 ? (size_t)n : 1;
}

void cmd_vlog(const char *who, const char *fmt, va_list ap)
{
    char text[512];
    vsnprintf(text, sizeof text, fmt, ap);
    char stamp[32] = "-";
    time_t now = time(NULL);
    struct tm tm;
    if (gmtime_r(&now, &tm))
        strftime(stamp, sizeof stamp, "%Y-%m-%dT%H:%M:%SZ", &tm);
    fprintf(stderr, "%s weft %s: %s\n", stamp, who, text);
    fflush(stderr);
}

void cmd_log(const char *who, const char *fmt, ...)
{
    va_list ap;
    va_start(ap, fmt);
    cmd_vlog(who, fmt, ap);
    va_end(ap);
}

bool cmd_parse_duration(const char *text, double *seconds)
{
    char *end;
    errno = 0;
    double x = strtod(text, &end);
    double unit = 1.0;
    if (end == text || errno || !(x >= 0) || x > 1e9)
        return false;
    if (*end == 's')
        end++;
    else if (*end == 'm')
        unit = 60, end++;
    else if (*end == 'h')
        unit = 3600, end++;
    else if (*end == 'd')
        unit = 86400, end++;
    if (*end)
        return false;
    *seconds = x * unit;
    return true;
}

void cmd_nap(double seconds, const volatile sig_atomic_t *stop)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    double end = (double)now.tv_sec + 1e-9 * (double)now.tv_nsec + seconds;
    while (!*stop) {
        clock_gettime(CLOCK_MONOTONIC, &now);
        double left = end - ((double)now.tv_sec + 1e-9 * (double)now.tv_nsec);
        if (left <= 0)
            break;
        if (left > 0.1)   /* a stop is seen within 0.1 s */
            left = 0.1;
        struct timespec step = { 0, (long)(left * 1e9) };
        nanosleep(&step, NULL);
    }
}
