/* weft worker: retrains unattended. It reads a configuration file (format below and in
 * deploy/worker.conf), watches the input files, and when one changes or the retraining
 * interval has passed runs `weft train` as a child process (which warm-starts, evaluates,
 * gates, stores and promotes), then prunes old versions. Each step is logged; SIGTERM or
 * SIGINT stops it between steps: a training run in progress is finished first.
 *
 * The configuration: one "name = value" per line, '#' starts a comment, blank lines are
 * ignored. Lines before any section set the worker:
 *     store = DIR                 the snapshot store (required)
 *     check_every = 60s           how often the inputs are looked at (s, m, h, d suffixes)
 *     retrain_every = 1d          retrain at least this often, even without changes (0: only
 *                                 when an input changes)
 *     keep = 10                   versions kept besides live and previous (0: keep all)
 *     gate_tolerance = 0.01       passed to weft train --gate-tolerance
 *     warm_start = yes            passed to weft train --warm-start
 * Lines under "[train]" are `weft train` options without their dashes: "model = distmult"
 * becomes --model distmult, "undirected = yes" becomes --undirected ("no" leaves it out), and
 * a name may repeat (edges). The files named by edges, valid, test, labels, features and
 * split are the watched inputs; relative paths are taken from the configuration file's
 * directory. */
#include <errno.h>
#include <limits.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include <sys/wait.h>
#include <time.h>
#include <unistd.h>

#include <jansson.h>

#include "cmd_train.h"
#include "weft/io.h"
#include "weft/store.h"

#define SUB "worker"
#define MAX_TRAIN_ARGS 128
#define MAX_INPUTS 70

/* Options of weft train that name watched input files. */
static const char *const input_options[] = { "edges", "valid", "test", "labels", "features",
                                             "split", "types" };
/* Options the worker sets itself. */
static const char *const worker_options[] = { "store", "quiet", "force", "no-promote",
                                              "gate-tolerance", "warm-start", "report",
                                              "help" };

struct input {
    char *path;
    char sha256[65];
    struct timespec mtime;   /* of the last hash: unchanged mtime and size skip rehashing */
    off_t size;
    bool has_hash;
};

struct worker_config {
    char *store;
    double check_every, retrain_every, gate_tolerance;
    unsigned long keep;
    bool warm_start;
    char *train[MAX_TRAIN_ARGS];   /* "--name", "value" ... (owned) */
    size_t n_train;
    struct input inputs[MAX_INPUTS];
    size_t n_inputs;
};

static void config_fini(struct worker_config *c)
{
    free(c->store);
    for (size_t i = 0; i < c->n_train; i++)
        free(c->train[i]);
    for (size_t i = 0; i < c->n_inputs; i++)
        free(c->inputs[i].path);
}

/* ---- the configuration file ---- */

static char *trim(char *s)
{
    while (*s == ' ' || *s == '\t')
        s++;
    size_t n = strlen(s);
    while (n && (s[n - 1] == ' ' || s[n - 1] == '\t' || s[n - 1] == '\r' || s[n - 1] == '\n'))
        s[--n] = '\0';
    return s;
}

/* @p path taken from the directory of the configuration file @p conf when relative. */
static char *resolve(const char *conf, const char *path)
{
    const char *slash = strrchr(conf, '/');
    if (path[0] == '/' || !slash) {
        return strdup(path);
    }
    size_t dir = (size_t)(slash - conf) + 1, n = strlen(path);
    char *out = malloc(dir + n + 1);
    if (out) {
        memcpy(out, conf, dir);
        memcpy(out + dir, path, n + 1);
    }
    return out;
}

static bool in_list(const char *const *list, size_t n, const char *s)
{
    for (size_t i = 0; i < n; i++)
        if (!strcmp(list[i], s))
            return true;
    return false;
}

#define COUNT(a) (sizeof(a) / sizeof((a)[0]))

/* One "name = value" of the worker part; returns NULL or the reason it is refused. */
static const char *set_worker(struct worker_config *c, const char *conf, const char *k,
                              const char *v)
{
    if (!strcmp(k, "store")) {
        free(c->store);
        return (c->store = resolve(conf, v)) ? NULL : "out of memory";
    }
    if (!strcmp(k, "check_every"))
        return cmd_parse_duration(v, &c->check_every) && c->check_every >= 1
                   ? NULL : "check_every: a duration of at least 1s, like 60s, 5m, 1h";
    if (!strcmp(k, "retrain_every"))
        return cmd_parse_duration(v, &c->retrain_every)
                   ? NULL : "retrain_every: a duration like 12h or 1d, or 0";
    if (!strcmp(k, "gate_tolerance")) {
        char *end;
        c->gate_tolerance = strtod(v, &end);
        return *end || !(c->gate_tolerance >= 0 && c->gate_tolerance <= 1)
                   ? "gate_tolerance: a number from 0 to 1" : NULL;
    }
    if (!strcmp(k, "keep")) {
        char *end;
        errno = 0;
        c->keep = strtoul(v, &end, 10);
        return *end || errno || v[0] == '-' ? "keep: a whole number (0 keeps everything)" : NULL;
    }
    if (!strcmp(k, "warm_start")) {
        if (strcmp(v, "yes") && strcmp(v, "no"))
            return "warm_start: yes or no";
        c->warm_start = !strcmp(v, "yes");
        return NULL;
    }
    return "unknown setting (known: store, check_every, retrain_every, keep, gate_tolerance, "
           "warm_start; weft train options go under [train])";
}

static const char *add_train(struct worker_config *c, const char *conf, const char *k,
                             const char *v)
{
    if (in_list(worker_options, COUNT(worker_options), k))
        return "the worker sets this option itself";
    if (c->n_train + 2 > MAX_TRAIN_ARGS)
        return "too many options";
    bool is_flag = !strcmp(v, "yes") || !strcmp(v, "no");
    if (is_flag && !strcmp(v, "no"))
        return NULL;
    size_t n = strlen(k);
    char *flag = malloc(n + 3);
    if (!flag)
        return "out of memory";
    memcpy(flag, "--", 2);
    memcpy(flag + 2, k, n + 1);
    c->train[c->n_train++] = flag;
    if (is_flag)
        return NULL;
    bool is_input = in_list(input_options, COUNT(input_options), k);
    char *value = is_input ? resolve(conf, v) : strdup(v);
    if (!value)
        return "out of memory";
    c->train[c->n_train++] = value;
    if (is_input) {
        if (c->n_inputs == MAX_INPUTS)
            return "too many input files";
        struct input *in = &c->inputs[c->n_inputs++];
        memset(in, 0, sizeof *in);
        if (!(in->path = strdup(value)))
            return "out of memory";
    }
    return NULL;
}

static bool load_config(const char *path, struct worker_config *c)
{
    memset(c, 0, sizeof *c);
    c->check_every = 60;
    c->gate_tolerance = 0.01;
    c->warm_start = true;
    FILE *f = fopen(path, "r");
    if (!f) {
        fprintf(stderr, "weft: %s: %s\n", path, strerror(errno));
        return false;
    }
    char *line = NULL;
    size_t cap = 0, lineno = 0;
    bool in_train = false, ok = true;
    while (ok && getline(&line, &cap, f) != -1) {
        lineno++;
        char *hash = strchr(line, '#');
        if (hash)
            *hash = '\0';
        char *s = trim(line);
        const char *why = NULL;
        if (!*s)
            continue;
        if (*s == '[') {
            if (!strcmp(s, "[train]"))
                in_train = true;
            else
                why = "unknown section (known: [train])";
        } else {
            char *eq = strchr(s, '=');
            if (!eq) {
                why = "expected name = value";
            } else {
                *eq = '\0';
                char *k = trim(s), *v = trim(eq + 1);
                if (!*k || !*v)
                    why = "expected name = value";
                else
                    why = in_train ? add_train(c, path, k, v) : set_worker(c, path, k, v);
            }
        }
        if (why) {
            fprintf(stderr, "weft: %s:%zu: %s\n", path, lineno, why);
            ok = false;
        }
    }
    free(line);
    fclose(f);
    if (ok && !c->store) {
        fprintf(stderr, "weft: %s: no 'store = DIR' line\n", path);
        ok = false;
    }
    if (ok && c->n_inputs == 0) {
        fprintf(stderr, "weft: %s: [train] names no input file (edges = FILE)\n", path);
        ok = false;
    }
    return ok;
}

bool cmd_worker_read_config(const char *path)
{
    struct worker_config c;
    bool ok = load_config(path, &c);
    config_fini(&c);
    return ok;
}

/* ---- inputs and the store ---- */

/* Refresh each input's SHA-256 (rehashing only files whose size or mtime moved). Returns
 * false, logging why, when one cannot be read. */
static bool fingerprint(struct worker_config *c)
{
    for (size_t i = 0; i < c->n_inputs; i++) {
        struct input *in = &c->inputs[i];
        struct stat st;
        if (stat(in->path, &st) != 0) {
            cmd_log(SUB, "input %s: %s; waiting for it", in->path, strerror(errno));
            return false;
        }
        if (in->has_hash && st.st_size == in->size && st.st_mtim.tv_sec == in->mtime.tv_sec &&
            st.st_mtim.tv_nsec == in->mtime.tv_nsec)
            continue;
        weft_error err;
        if (weft_io_sha256_file(in->path, in->sha256, &err) != WEFT_OK) {
            cmd_log(SUB, "input %s: %s; waiting for it", in->path, err.msg);
            return false;
        }
        in->size = st.st_size;
        in->mtime = st.st_mtim;
        in->has_hash = true;
    }
    return true;
}

/* Days since 1970-01-01 of a civil date (Howard Hinnant's algorithm, public domain). */
static long days_from_civil(long y, unsigned m, unsigned d)
{
    y -= m <= 2;
    long era = (y >= 0 ? y : y - 399) / 400;
    unsigned yoe = (unsigned)(y - era * 400);
    unsigned doy = (153 * (m + (m > 2 ? -3 : 9)) + 2) / 5 + d - 1;
    unsigned doe = yoe * 365 + yoe / 4 - yoe / 100 + doy;
    return era * 146097 + (long)doe - 719468;
}

static double parse_utc(const char *s)
{
    int y, mo, d, h, mi, se;
    if (!s || sscanf(s, "%d-%d-%dT%d:%d:%dZ", &y, &mo, &d, &h, &mi, &se) != 6)
        return 0;
    return (double)days_from_civil(y, (unsigned)mo, (unsigned)d) * 86400.0 + h * 3600.0 +
           mi * 60.0 + se;
}

/* The newest snapshot's creation time and whether its inputs are exactly the current ones
 * (same SHA-256s, in order). No store or no snapshot: *created = 0. */
static bool newest_snapshot(const struct worker_config *c, double *created, bool *same_inputs)
{
    weft_store *s = NULL;
    json_t *all = NULL;
    weft_error err;
    *created = 0;
    *same_inputs = false;
    weft_err rc = weft_store_open(c->store, WEFT_STORE_READONLY, 0, &s, &err);
    if (rc == WEFT_ERR_NOT_FOUND || rc == WEFT_ERR_IO)
        return true;   /* not created yet: the first run creates it */
    if (rc == WEFT_OK)
        rc = weft_store_list(s, &all, &err);
    weft_store_close(s);
    if (rc != WEFT_OK) {
        cmd_log(SUB, "store %s: %s", c->store, err.msg);
        return false;
    }
    size_t n = json_array_size(all);
    if (n) {
        json_t *m = json_array_get(all, n - 1);
        *created = parse_utc(json_string_value(json_object_get(m, "created")));
        /* The same files by content, in any order (weft train lists them by role). */
        json_t *inputs = json_object_get(m, "inputs");
        bool same = json_array_size(inputs) == c->n_inputs;
        bool used[MAX_INPUTS] = { false };
        for (size_t i = 0; same && i < c->n_inputs; i++) {
            bool found = false;
            for (size_t j = 0; !found && j < c->n_inputs; j++) {
                const char *h = json_string_value(json_object_get(json_array_get(inputs, j),
                                                                  "sha256"));
                found = !used[j] && h && !strcmp(h, c->inputs[i].sha256);
                used[j] |= found;
            }
            same = found;
        }
        *same_inputs = same;
    }
    json_decref(all);
    return true;
}

/* ---- running weft itself ---- */

static volatile sig_atomic_t stop_requested;

static void on_stop(int sig)
{
    (void)sig;
    stop_requested = 1;
}

/* Run `weft ARGS...` (this binary) and wait for it, whatever signals arrive meanwhile. Returns
 * its exit status, or -1 when it could not run or died of a signal. */
static int run_self(char **args)
{
    pid_t pid = fork();
    if (pid < 0) {
        cmd_log(SUB, "fork: %s", strerror(errno));
        return -1;
    }
    if (pid == 0) {
        /* The child finishes its step even when the worker is asked to stop. */
        signal(SIGTERM, SIG_DFL);
        signal(SIGINT, SIG_IGN);
        execv("/proc/self/exe", args);
        fprintf(stderr, "weft: cannot run /proc/self/exe: %s\n", strerror(errno));
        _exit(127);
    }
    int status;
    while (waitpid(pid, &status, 0) < 0)
        if (errno != EINTR)
            return -1;
    if (WIFSIGNALED(status)) {
        cmd_log(SUB, "weft %s died of signal %d", args[1], WTERMSIG(status));
        return -1;
    }
    return WEXITSTATUS(status);
}

enum step_result { STEP_DONE, STEP_FATAL };

static enum step_result train_once(const struct worker_config *c, const char *why)
{
    char *args[MAX_TRAIN_ARGS + 12];
    char tol[32];
    size_t n = 0;
    snprintf(tol, sizeof tol, "%g", c->gate_tolerance);
    args[n++] = "weft";
    args[n++] = "train";
    args[n++] = "--store";
    args[n++] = c->store;
    args[n++] = "--quiet";
    args[n++] = "--gate-tolerance";
    args[n++] = tol;
    if (c->warm_start)
        args[n++] = "--warm-start";
    for (size_t i = 0; i < c->n_train; i++)
        args[n++] = c->train[i];
    args[n] = NULL;
    cmd_log(SUB, "training (%s)", why);
    fflush(stdout);
    int rc = run_self(args);
    if (rc == CMD_OK) {
        cmd_log(SUB, "trained: the new snapshot is live");
    } else if (rc == CMD_REJECTED) {
        cmd_log(SUB, "trained: the gate refused the new snapshot; the live one stays");
    } else if (rc == CMD_USAGE) {
        cmd_log(SUB, "weft train refused the options of [train] (see above): stopping");
        return STEP_FATAL;
    } else {
        cmd_log(SUB, "training failed (status %d); next attempt at the next check", rc);
    }
    if (c->keep) {
        char keep[32];
        snprintf(keep, sizeof keep, "%lu", c->keep);
        char *prune[] = { "weft", "snapshots", "prune", "--store", c->store, "--keep", keep,
                          NULL };
        int prc = run_self(prune);
        cmd_log(SUB, prc == CMD_OK ? "pruned to %s versions besides live and previous"
                                   : "pruning to %s versions failed", keep);
    }
    return STEP_DONE;
}

static double now_seconds(void)
{
    struct timespec ts;
    clock_gettime(CLOCK_REALTIME, &ts);
    return (double)ts.tv_sec + 1e-9 * (double)ts.tv_nsec;
}

static void print_help(void)
{
    printf("usage: weft worker --config FILE [--once]\n\n"
           "Retrains unattended: looks at the input files every check_every, and when one has\n"
           "changed since the newest snapshot (by SHA-256) or retrain_every has passed, runs\n"
           "weft train with the [train] options (warm start, gate, promotion), then prunes to\n"
           "keep versions. Logs each step on stderr. SIGTERM or SIGINT stops it between steps\n"
           "(a training run in progress is finished first).\n\n"
           "  --config FILE   the configuration (required; format in weft-worker.conf(5),\n"
           "                  an example in deploy/worker.conf)\n"
           "  --once          one check (and training if due), then exit\n"
           "  --help          print this help\n\n"
           "settings of the file and their defaults: store (required), check_every 60s,\n"
           "retrain_every 0 (only when an input changes), keep 0 (keep all), gate_tolerance\n"
           "0.01, warm_start yes; [train] holds weft train options (edges required).\n\n"
           "Exit status: 0 stopped (SIGTERM, SIGINT, or after --once), 1 the file is unreadable\n"
           "or invalid, or weft train refused the [train] options, 2 bad arguments. A failed\n"
           "or refused training run is logged and the worker goes on.\n");
}

int cmd_worker_main(int argc, char **argv)
{
    const char *config = NULL;
    bool once = false;
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            print_help();
            return CMD_OK;
        } else if (!strcmp(argv[i], "--once")) {
            once = true;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--config", &bad))) {
            config = v;
        } else {
            return bad ? CMD_USAGE : cmd_usage_error(SUB, "unknown option '%s'", argv[i]);
        }
    }
    if (!config)
        return cmd_usage_error(SUB, "--config FILE is required");
    struct worker_config c;
    if (!load_config(config, &c)) {
        config_fini(&c);
        return CMD_FAIL;
    }
    struct sigaction sa;
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_stop;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGTERM, &sa, NULL);
    sigaction(SIGINT, &sa, NULL);
    char every[48] = "";
    if (c.retrain_every > 0)
        snprintf(every, sizeof every, " and every %gs", c.retrain_every);
    cmd_log(SUB, "started: store %s, %zu inputs, checking every %gs, retraining when an input "
            "changes%s", c.store, c.n_inputs, c.check_every, every);
    int status = CMD_OK;
    while (!stop_requested) {
        double created;
        bool same;
        if (fingerprint(&c) && newest_snapshot(&c, &created, &same)) {
            double age = now_seconds() - created;
            const char *why = created == 0 ? "no snapshot yet"
                            : !same ? "an input changed"
                            : c.retrain_every > 0 && age >= c.retrain_every ? "interval passed"
                                                                            : NULL;
            if (why && train_once(&c, why) == STEP_FATAL) {
                status = CMD_FAIL;
                break;
            }
        }
        if (once)
            break;
        cmd_nap(c.check_every, &stop_requested);
    }
    cmd_log(SUB, stop_requested ? "stopped on request" : "stopped");
    config_fini(&c);
    return status;
}
