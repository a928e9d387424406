/* weft: subcommand dispatch, --help and --version. */
#include <cblas.h>
#include <jansson.h>
#include <lmdb.h>
#include <microhttpd.h>
#include <nettle/version.h>
#include <stdio.h>
#include <string.h>
#include <zlib.h>

#include "cmd.h"
#include "weft/version.h"

struct subcommand {
    const char *name;
    int (*run)(int argc, char **argv);
    const char *summary;
};

static const struct subcommand subcommands[] = {
    { "inspect", cmd_inspect_main, "graph statistics and input problems, before any training" },
    { "train", cmd_train_main, "train a model, evaluate it, store a snapshot and promote it" },
    { "eval", cmd_eval_main, "evaluate a stored snapshot on a test file beside the baseline" },
    { "serve", cmd_serve_main, "serve predictions from the live snapshot over HTTP" },
    { "worker", cmd_worker_main, "retrain unattended when inputs change or an interval passes" },
    { "snapshots", cmd_snapshots_main, "list, show, promote, roll back, prune, verify, export, import" },
    { "demo", cmd_demo_main, "write the invented demo data set (a hobby electronics marketplace)" },
    { "sync", cmd_sync_main, "import new snapshot files from a directory, make the newest live" },
};

/* The exit statuses of every subcommand (CMD_OK, CMD_FAIL, CMD_USAGE in cmd.h, CMD_REJECTED
 * in cmd_train.h); man/weft.1.in and DEVELOPERS.md hold the same table. */
static const char exit_codes[] =
    "exit status:\n"
    "  0  success; also after --help and --version, and when serve, worker or sync stop on\n"
    "     SIGTERM or SIGINT\n"
    "  1  failure: unreadable or invalid input, I/O, a store or snapshot problem; the reason\n"
    "     is printed as 'weft: MESSAGE' on stderr. Also: 'weft snapshots verify' found a\n"
    "     problem, 'weft worker' met a bad configuration file or [train] options\n"
    "  2  usage: unknown command or option, a required option missing, a malformed or\n"
    "     out-of-range value\n"
    "  3  'weft train': the gate refused the new snapshot; it is stored as rejected and the\n"
    "     live snapshot is unchanged (--force promotes anyway)\n";

static void print_usage(FILE *out, bool is_full)
{
    fprintf(out, "usage: weft COMMAND [options]\n"
                 "       weft --help | --version\n\n"
                 "commands:\n");
    for (size_t i = 0; i < sizeof subcommands / sizeof subcommands[0]; i++)
        fprintf(out, "  %-10s %s\n", subcommands[i].name, subcommands[i].summary);
    fprintf(out, "\n'weft COMMAND --help' lists the options of a command, each with its default;\n"
                 "an option without a value is a switch, off unless given.\n");
    if (!is_full)
        return;
    fprintf(out, "'man weft' describes every command; 'man weft-worker.conf' the worker's file.\n\n"
                 "%s", exit_codes);
}

/* "weft X.Y.Z", then the versions of the libraries this process runs with. */
static void print_version(void)
{
    int major = 0, minor = 0, patch = 0;
    mdb_version(&major, &minor, &patch);
    /* "OpenBLAS 0.3.21 DYNAMIC_ARCH ...": its first two words */
    const char *blas = openblas_get_config();
    const char *space = blas ? strchr(blas, ' ') : NULL;
    const char *end = space ? strchr(space + 1, ' ') : NULL;
    int blas_len = !blas ? 0 : end ? (int)(end - blas) : (int)strlen(blas);
    printf("weft %s\n", WEFT_VERSION);
    printf("libweft %s, jansson %s, LMDB %d.%d.%d, libmicrohttpd %s, zlib %s, Nettle %d.%d, "
           "%.*s\n", weft_version_string(), jansson_version_str(), major, minor, patch,
           MHD_get_version(), zlibVersion(), nettle_version_major(), nettle_version_minor(),
           blas_len, blas ? blas : "");
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        print_usage(stderr, false);
        return CMD_USAGE;
    }
    if (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h") || !strcmp(argv[1], "help")) {
        print_usage(stdout, true);
        return fflush(stdout) == 0 ? CMD_OK : CMD_FAIL;
    }
    if (!strcmp(argv[1], "--version")) {
        print_version();
        return fflush(stdout) == 0 ? CMD_OK : CMD_FAIL;
    }
    for (size_t i = 0; i < sizeof subcommands / sizeof subcommands[0]; i++)
        if (!strcmp(argv[1], subcommands[i].name))
            return subcommands[i].run(argc - 1, argv + 1);
    fprintf(stderr, "weft: unknown command '%s'\n\n", argv[1]);
    print_usage(stderr, false);
    return CMD_USAGE;
}
