#!/usr/bin/python3
"""The first query after a snapshot swap against the tenth (bench/service.sh).

usage: swap_first_query.py PORT WEFT STORE SWAPS FIRST_VERSION ACCESS_LOG SERVER_PID

Promotes versions FIRST_VERSION .. FIRST_VERSION + SWAPS - 1 in turn while one client keeps
the server busy with top-10 queries (it never pauses: after an idle pause the first queries
are slower with or without a swap, as the core and its caches warm up again). The times are
the server's own, from its access log (ACCESS_LOG, one JSON line per request with its
duration and the version that answered), so the client's noise stays out. For each swap:
the request that first gets an answer from the new version (it arrived while the server was
still preparing the swap, so its time includes a wait for the core: reported apart); then
the first ten requests sent after it, all begun after the swap (the first and the tenth
compared); then, with no swap, 60 requests later, ten more (the control: how much "first
against tenth" moves by chance). The promoting
process runs on the client's core, so the client waits for it to exit before it looks for
the new version (run the server with a --poll-ms long enough for that; a swap seen before
the process exits is skipped and counted). Also the most page faults the server took in the
ten requests after a swap. Prints one JSON object.

The rule (ours): the first query is no slower than the tenth when the median of the swaps'
first / tenth ratios is at most 1.05 and a one-sided Wilcoxon signed-rank test (scipy) of
first > tenth over the swaps gives p >= 0.05."""
import http.client, json, statistics, subprocess, sys

port, weft, store = int(sys.argv[1]), sys.argv[2], sys.argv[3]
swaps, first_version, access_log, pid = int(sys.argv[4]), int(sys.argv[5]), sys.argv[6], sys.argv[7]
FILLER, TEN = 60, 10


def minor_faults():   # the server's, from /proc/PID/stat (field 10)
    with open("/proc/%s/stat" % pid) as f:
        return int(f.read().rsplit(")", 1)[1].split()[7])


c = http.client.HTTPConnection("127.0.0.1", port)


def ask(node):
    c.request("GET", "/v1/links/predict?source=%d&k=10" % node)
    return json.loads(c.getresponse().read())["version"]


counted, skipped, faults = [], 0, 0
for s in range(swaps):
    version = first_version + s
    promote = subprocess.Popen([weft, "snapshots", "promote", str(version), "--store", store],
                               stdout=subprocess.DEVNULL)
    polls, early = 0, False
    while promote.poll() is None:   # the promoting process shares the client's core
        early |= ask(7 + polls % 64) == version
        polls += 1
    while ask(7 + polls % 64) != version:   # busy until an answer comes from the new one
        polls += 1
    before = minor_faults()
    for i in range(TEN):
        ask(1000 + 37 * i + 3 * s)
    faults = max(faults, minor_faults() - before)
    for i in range(FILLER + TEN):
        ask(2000 + 37 * i + 3 * s)
    if early:   # the server swapped before the promoting process was gone: not counted
        skipped += 1
    else:
        counted.append(version)

c.close()
rows = [json.loads(line) for line in open(access_log)]
swap, first, tenth, c_first, c_tenth = [], [], [], [], []
for v in counted:
    at = next(i for i, r in enumerate(rows) if r.get("version") == v)
    ms = [r["duration_ms"] for r in rows[at:at + 1 + 2 * TEN + FILLER]]
    swap.append(ms[0])
    first.append(ms[1])
    tenth.append(ms[TEN])
    c_first.append(ms[1 + TEN + FILLER])
    c_tenth.append(ms[2 * TEN + FILLER])
try:
    from scipy.stats import wilcoxon
    # the normal approximation: the times have ties (a microsecond apart at most)
    p = float(wilcoxon(first, tenth, alternative="greater", method="approx").pvalue)
except ImportError:
    p = None
med = statistics.median
ratio = med(a / b for a, b in zip(first, tenth))
print(json.dumps({
    "swaps": len(first), "skipped": skipped,
    "during_swap_ms": med(swap), "first_ms": med(first), "tenth_ms": med(tenth),
    "ratio": ratio,
    "control_first_ms": med(c_first), "control_tenth_ms": med(c_tenth),
    "control_ratio": med(a / b for a, b in zip(c_first, c_tenth)),
    "wilcoxon_p": p, "most_faults": faults,
    "met": ratio <= 1.05 and (p is None or p >= 0.05),
    "first_each": first, "tenth_each": tenth,
}))
