/* Fuzz target: the configuration file of weft worker (server/cmd_worker.c, format in
 * deploy/worker.conf), through cmd_worker_read_config(): "name = value" lines, comments,
 * the [train] section, durations, numbers, flags, repeated input files. The input is the
 * file as is; it is read as worker.conf in a private directory, so that relative paths are
 * resolved against that directory. Checks: no crash, no leak. A rejected file's reason is
 * printed on stderr, which tests/fuzz/fuzz.sh closes for this target (-close_fd_mask=2:
 * libFuzzer and the sanitizers keep a copy for their reports). */
#include "../../server/cmd.h"
#include "fuzz.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size)
{
    const char *path = fuzz_write("worker.conf", data, size, false);
    (void)cmd_worker_read_config(path);
    return 0;
}
