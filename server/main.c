/* weft: subcommand dispatch. */
#include <stdio.h>
#include <string.h>

#include "cmd.h"

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
};

static void print_usage(FILE *out)
{
    fprintf(out, "usage: weft <command> [options]   (weft <command> --help for its options)\n\n"
                 "commands:\n");
    for (size_t i = 0; i < sizeof subcommands / sizeof subcommands[0]; i++)
        fprintf(out, "  %-10s %s\n", subcommands[i].name, subcommands[i].summary);
}

int main(int argc, char **argv)
{
    if (argc < 2) {
        print_usage(stderr);
        return CMD_USAGE;
    }
    if (!strcmp(argv[1], "--help") || !strcmp(argv[1], "-h") || !strcmp(argv[1], "help")) {
        print_usage(stdout);
        return CMD_OK;
    }
    for (size_t i = 0; i < sizeof subcommands / sizeof subcommands[0]; i++)
        if (!strcmp(argv[1], subcommands[i].name))
            return subcommands[i].run(argc - 1, argv + 1);
    fprintf(stderr, "weft: unknown command '%s'\n\n", argv[1]);
    print_usage(stderr);
    return CMD_USAGE;
}
