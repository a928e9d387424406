#!/bin/sh
# deploy/: the Kubernetes manifests, the systemd units and the Dockerfile agree with the
# server they run. Every YAML file under deploy/k8s is parsed (python3-yaml); each probe's
# path must be a GET route both in openapi/openapi.yaml and answered 200 or 503 by a live
# `weft serve`; each containerPort must be the port of the container's --listen, the scrape
# annotations must name that port and /metrics; every --flag of every weft command line
# must be one its `weft <sub> --help` lists; the volumes must connect the worker's exports
# to the servers' sync. Then the manifests' own command lines run against temporary
# directories: the CronJob's script (train, export under a temporary name, keep N), the sync
# sidecar's and the server's arguments. systemd-analyze verifies the units in a temporary
# root when it is installed; docker checks the Dockerfile when a daemon answers (else SKIP
# lines say so), and the Dockerfile's runtime package list is derived here as it would be
# in the image. Data: karate and Cora edges, 5 epochs (tests/data/README.md); the CronJob's
# run trains Cora, which passes the gate.
set -u
. "$TOP/tests/e2e/lib.sh"

PY=/usr/bin/python3
UNITS="$TOP/deploy/systemd"
X="$E2E_TMP/extracted"
mkdir -p "$X"

# ---- the server's GET routes: in the spec, and answered by a live server ----
"$WEFT" train --store "$E2E_TMP/store" --edges "$TOP/tests/data/karate/edges.tsv" --undirected \
    --epochs 5 --force --quiet >"$E2E_TMP/train.log" 2>&1
check "a snapshot to serve (karate, 5 epochs, forced past the gate) is live" test $? -eq 0
$PY - "$TOP/openapi/openapi.yaml" >"$E2E_TMP/spec-routes" <<'EOF'
import sys, yaml
spec = yaml.safe_load(open(sys.argv[1]))
for path, item in spec["paths"].items():
    if "get" in item and "{" not in path:
        print(path)
EOF
check "openapi.yaml lists GET routes" test -s "$E2E_TMP/spec-routes"
start_server "$E2E_TMP/store" || finish
: >"$E2E_TMP/routes"
while read -r route; do
    code=$(curl -s -o /dev/null -w '%{http_code}' "$BASE$route")
    case "$code" in 200|503) echo "$route" >>"$E2E_TMP/routes" ;; esac
done <"$E2E_TMP/spec-routes"
check "the live server answers /healthz, /readyz and /metrics with 200 or 503" \
    sh -c "grep -qx /healthz '$E2E_TMP/routes' && grep -qx /readyz '$E2E_TMP/routes' && grep -qx /metrics '$E2E_TMP/routes'"
code=$(curl -s -o /dev/null -w '%{http_code}' "$BASE/ready")
check "a path that is no route answers 404 (so the route check can fail)" test "$code" = 404
stop_server

# ---- the manifests, the units and the Dockerfile, statically ----
$PY - "$TOP" "$WEFT" "$E2E_TMP/routes" "$X" >"$E2E_TMP/static.log" 2>&1 <<'EOF'
import glob, os, re, shlex, subprocess, sys, yaml

top, weft, routes_file, out = sys.argv[1:5]
routes = set(open(routes_file).read().split())
failed = 0

def check(name, ok, detail=""):
    global failed
    print(("ok   " if ok else "FAIL ") + name + ("" if ok or not detail else ": " + str(detail)))
    failed += not ok

helps = {}
def flags_of(sub):
    if sub not in helps:
        text = subprocess.run([weft, sub, "--help"], capture_output=True, text=True).stdout
        helps[sub] = set(re.findall(r"--[a-z][a-z0-9-]*", text))
    return helps[sub]

def check_flags(where, argv):
    """argv: a weft command line without the program: [sub, args...]."""
    sub = argv[0]
    unknown = [a.split("=")[0] for a in argv[1:]
               if a.startswith("--") and a.split("=")[0] not in flags_of(sub)]
    check(f"{where}: every flag of 'weft {sub}' is in its --help", not unknown, unknown)

def check_script_flags(where, script):
    """Every `weft SUB ...` in a shell script, up to the end of its command."""
    for sub, rest in re.findall(r"\bweft ([a-z]+)([^\n|;&)]*)", script):
        check_flags(f"{where}, 'weft {sub}'", [sub] + re.findall(r"--[a-z][a-z0-9-]*", rest))

def opt(argv, name):
    for i, a in enumerate(argv):
        if a == name and i + 1 < len(argv):
            return argv[i + 1]
        if a.startswith(name + "="):
            return a[len(name) + 1:]
    return None

def listen_port(argv):
    listen = opt(argv, "--listen") or "127.0.0.1:8080"
    host, port = listen.rsplit(":", 1)
    return host, int(port)

# -- every YAML file parses --
docs = []
for path in sorted(glob.glob(os.path.join(top, "deploy/k8s/*.yaml"))):
    try:
        for d in yaml.safe_load_all(open(path)):
            if d is not None:
                docs.append((os.path.basename(path), d))
        check(f"{os.path.basename(path)} parses", True)
    except yaml.YAMLError as e:
        check(f"{os.path.basename(path)} parses", False, e)
objects = [(f, d) for f, d in docs if "apiVersion" in d and "kind" in d]
scrape = [(f, d) for f, d in docs if "scrape_configs" in d]
check("deploy/k8s holds Kubernetes objects and a Prometheus scrape configuration",
      objects and scrape)
check("no object names a namespace", all("namespace" not in d.get("metadata", {})
                                         for _, d in objects))
by_kind = {}
for f, d in objects:
    by_kind.setdefault(d["kind"], []).append(d)
claims = {d["metadata"]["name"]: d for d in by_kind.get("PersistentVolumeClaim", [])}
configmaps = {d["metadata"]["name"]: d for d in by_kind.get("ConfigMap", [])}

def pod_specs():
    for d in by_kind.get("Deployment", []):
        yield d, d["spec"]["template"]
    for d in by_kind.get("CronJob", []):
        yield d, d["spec"]["jobTemplate"]["spec"]["template"]

def mount_of(container, spec, path):
    """The volume under which path lies in this container: (volume, mount)."""
    best = None
    for m in container.get("volumeMounts", []):
        mp = m["mountPath"].rstrip("/")
        if path == mp or path.startswith(mp + "/"):
            if best is None or len(mp) > len(best[1]["mountPath"]):
                vol = next(v for v in spec.get("volumes", []) if v["name"] == m["name"])
                best = (vol, m)
    return best

serve_port = None
for owner, template in pod_specs():
    spec = template["spec"]
    name = owner["metadata"]["name"]
    psc = spec.get("securityContext", {})
    check(f"{name}: pod runs as non-root", psc.get("runAsNonRoot") is True and
          psc.get("runAsUser", 0) != 0)
    volumes = {v["name"] for v in spec.get("volumes", [])}
    for v in spec.get("volumes", []):
        pvc = v.get("persistentVolumeClaim")
        if pvc:
            check(f"{name}: volume {v['name']} claims a PVC defined here",
                  pvc["claimName"] in claims, pvc["claimName"])
        cm = v.get("configMap")
        if cm:
            check(f"{name}: volume {v['name']} uses a ConfigMap defined here",
                  cm["name"] in configmaps, cm["name"])
    for c in spec.get("initContainers", []) + spec["containers"]:
        cname = f"{name}/{c['name']}"
        sc = c.get("securityContext", {})
        check(f"{cname}: read-only root, no privilege escalation, no capabilities",
              sc.get("readOnlyRootFilesystem") is True and
              sc.get("allowPrivilegeEscalation") is False and
              sc.get("capabilities", {}).get("drop") == ["ALL"])
        res = c.get("resources", {})
        check(f"{cname}: resource requests and a memory limit",
              "cpu" in res.get("requests", {}) and "memory" in res.get("requests", {}) and
              "memory" in res.get("limits", {}))
        check(f"{cname}: every volume mount names a volume of the pod",
              all(m["name"] in volumes for m in c.get("volumeMounts", [])))
        ports = {p.get("name"): p["containerPort"] for p in c.get("ports", [])}
        argv = c.get("args", []) if "command" not in c else None
        if argv:
            check_flags(cname, argv)
            open(os.path.join(out, f"{c['name']}.args"), "w").write("\n".join(argv) + "\n")
        if argv and argv[0] == "serve":
            host, port = listen_port(argv)
            serve_port = port
            check(f"{cname}: listens on all addresses, not loopback",
                  host in ("0.0.0.0", "[::]"), host)
            check(f"{cname}: containerPort {list(ports.values())} is the --listen port {port}",
                  list(ports.values()) == [port])
            for kind, want in (("readinessProbe", "/readyz"), ("livenessProbe", "/healthz")):
                probe = c.get(kind, {}).get("httpGet")
                check(f"{cname}: {kind} on {want}", probe and probe["path"] == want, probe)
                if not probe:
                    continue
                check(f"{cname}: {kind} path {probe['path']} is a GET route of the server",
                      probe["path"] in routes)
                p = probe["port"]
                check(f"{cname}: {kind} port {p} is the --listen port",
                      (ports.get(p) if isinstance(p, str) else p) == port)
            ann = template["metadata"].get("annotations", {})
            check(f"{name}: prometheus.io/scrape is \"true\"", ann.get("prometheus.io/scrape") == "true")
            check(f"{name}: prometheus.io/port is the --listen port",
                  ann.get("prometheus.io/port") == str(port), ann.get("prometheus.io/port"))
            check(f"{name}: prometheus.io/path is /metrics, a GET route of the server",
                  ann.get("prometheus.io/path") == "/metrics" and "/metrics" in routes)
            check(f"{name}: at least 2 replicas", owner["spec"].get("replicas", 1) >= 2)
            serve_store = opt(argv, "--store")
            store_vol = mount_of(c, spec, serve_store)
            check(f"{cname}: the store is on an emptyDir of its own (no LMDB over a network)",
                  store_vol and "emptyDir" in store_vol[0], store_vol)
            syncs = [s for s in spec["containers"] if s.get("args", [""])[0] == "sync"]
            check(f"{name}: a weft sync container beside the server", len(syncs) == 1)
            for s in syncs:
                check(f"{name}: sync writes the store the server reads",
                      opt(s["args"], "--store") == serve_store and
                      mount_of(s, spec, serve_store)[0] is store_vol[0])
                exports = mount_of(s, spec, opt(s["args"], "--from"))
                check(f"{name}: sync reads --from on the shared exports PVC, read-only",
                      exports and "persistentVolumeClaim" in exports[0] and
                      exports[1].get("readOnly") is True, exports)
                if exports and "persistentVolumeClaim" in exports[0]:
                    claim = claims.get(exports[0]["persistentVolumeClaim"]["claimName"], {})
                    check(f"{name}: the exports PVC can be mounted by many pods",
                          {"ReadWriteMany", "ReadOnlyMany"} & set(
                              claim.get("spec", {}).get("accessModes", [])))
                    open(os.path.join(out, "exports-claim"), "w").write(
                        exports[0]["persistentVolumeClaim"]["claimName"])
        if c.get("command", [None])[0] == "/bin/sh":
            env = {e["name"]: e["value"] for e in c.get("env", [])}
            script = c["args"][0]
            open(os.path.join(out, "cronjob.sh"), "w").write(script)
            open(os.path.join(out, "cronjob.env"), "w").write(
                "".join(f"{k}={v}\n" for k, v in env.items()))
            check_script_flags(f"{cname} script", script)
            exports = mount_of(c, spec, env["WEFT_EXPORTS"])
            check(f"{cname}: WEFT_EXPORTS is on a PVC mounted read-write",
                  exports and "persistentVolumeClaim" in exports[0] and
                  not exports[1].get("readOnly"))
            claim_here = exports[0]["persistentVolumeClaim"]["claimName"] if exports else None
            open(os.path.join(out, "worker-exports-claim"), "w").write(str(claim_here))
            store = mount_of(c, spec, env["WEFT_STORE"])
            check(f"{cname}: the worker's store is on a ReadWriteOnce PVC",
                  store and "persistentVolumeClaim" in store[0] and
                  claims[store[0]["persistentVolumeClaim"]["claimName"]]["spec"]["accessModes"]
                  == ["ReadWriteOnce"])
            conf = mount_of(c, spec, env["WEFT_CONFIG"])
            check(f"{cname}: WEFT_CONFIG is a key of the mounted ConfigMap",
                  conf and "configMap" in conf[0])
            if conf and "configMap" in conf[0]:
                key = env["WEFT_CONFIG"][len(conf[1]["mountPath"].rstrip("/")) + 1:]
                text = configmaps[conf[0]["configMap"]["name"]]["data"].get(key)
                check(f"{cname}: the ConfigMap holds {key}", text is not None)
                text = text or ""
                open(os.path.join(out, "worker.conf"), "w").write(text)
                stores = re.findall(r"^store\s*=\s*(\S+)", text, re.M)
                check(f"{cname}: worker.conf's store is WEFT_STORE", stores == [env["WEFT_STORE"]],
                      stores)
            policy = [d for d in by_kind["CronJob"]][0]["spec"].get("concurrencyPolicy")
            check(f"{name}: one run at a time (concurrencyPolicy Forbid)", policy == "Forbid")

check("the worker exports to the PVC the servers sync from",
      os.path.exists(os.path.join(out, "exports-claim")) and
      open(os.path.join(out, "exports-claim")).read() ==
      open(os.path.join(out, "worker-exports-claim")).read())
for svc in by_kind.get("Service", []):
    for p in svc["spec"]["ports"]:
        check(f"Service {svc['metadata']['name']}: targetPort {p['targetPort']} is the server's port",
              p["targetPort"] in ("http", serve_port))

# -- the Prometheus scrape example --
for f, d in scrape:
    for job in d["scrape_configs"]:
        labels = [r.get("target_label") for r in job.get("relabel_configs", [])]
        srcs = sum((r.get("source_labels", []) for r in job.get("relabel_configs", [])), [])
        check(f"{f}: job {job['job_name']} takes the path and port from the annotations",
              "__metrics_path__" in labels and "__address__" in labels and
              "__meta_kubernetes_pod_annotation_prometheus_io_path" in srcs and
              "__meta_kubernetes_pod_annotation_prometheus_io_port" in srcs and
              "__meta_kubernetes_pod_annotation_prometheus_io_scrape" in srcs)

# -- systemd units: ExecStart flags, paths --
units = {}
for path in sorted(glob.glob(os.path.join(top, "deploy/systemd/*.service"))):
    keys = {}
    for line in open(path):
        line = line.strip()
        if "=" in line and not line.startswith(("#", "[")):
            k, v = line.split("=", 1)
            keys.setdefault(k, []).append(v)
    units[os.path.basename(path)] = keys
    argv = shlex.split(keys["ExecStart"][0])
    check(f"{os.path.basename(path)}: ExecStart runs /usr/local/bin/weft",
          argv[0] == "/usr/local/bin/weft")
    check_flags(os.path.basename(path), argv[1:])
    check(f"{os.path.basename(path)}: its own user, a read-only system, no new privileges",
          keys.get("User") == ["weft"] and keys.get("ProtectSystem") == ["strict"] and
          keys.get("NoNewPrivileges") == ["yes"] and keys.get("ProtectHome") == ["yes"] and
          keys.get("PrivateTmp") == ["yes"] and keys.get("Restart") == ["on-failure"])
    state = ["/var/lib/" + d for d in " ".join(keys.get("StateDirectory", [])).split()]
    check(f"{os.path.basename(path)}: the store is its only writable path (StateDirectory)",
          "/var/lib/weft/store" in state and not keys.get("ReadWritePaths"), state)
    if argv[1] == "serve":
        check("weft-serve.service: --store is /var/lib/weft/store",
              opt(argv, "--store") == "/var/lib/weft/store")
conf = open(os.path.join(top, "deploy/systemd/worker.conf")).read()
check("deploy/systemd/worker.conf writes the store weft-serve.service serves",
      re.findall(r"^store\s*=\s*(\S+)", conf, re.M) == ["/var/lib/weft/store"])
wargv = shlex.split(units["weft-worker.service"]["ExecStart"][0])
check("weft-worker.service reads /etc/weft/worker.conf (its ConfigurationDirectory)",
      opt(wargv, "--config") == "/etc/weft/worker.conf" and
      units["weft-worker.service"].get("ConfigurationDirectory") == ["weft"])

# -- Dockerfile --
df = open(os.path.join(top, "deploy/Dockerfile")).read().replace("\\\n", " ")
lines = [l.strip() for l in df.splitlines() if l.strip() and not l.strip().startswith("#")]
froms = [l.split()[1] for l in lines if l.startswith("FROM ")]
check("Dockerfile: Debian 12 images", froms and all(f.startswith("debian:12") for f in froms), froms)
check("Dockerfile: installs through deploy/install-deps.sh",
      any(l.startswith("RUN deploy/install-deps.sh") for l in lines))
user = [l.split()[1] for l in lines if l.startswith("USER ")]
check("Dockerfile: runs as a non-root user", user and user[-1].split(":")[0] not in ("0", "root"),
      user)
expose = [int(l.split()[1]) for l in lines if l.startswith("EXPOSE ")]
cmd = [l for l in lines if l.startswith("CMD ")]
entry = [l for l in lines if l.startswith("ENTRYPOINT ")]
cmd_argv = yaml.safe_load(cmd[-1][4:]) if cmd else []
check("Dockerfile: ENTRYPOINT is weft", entry and
      yaml.safe_load(entry[-1][11:]) == ["/usr/local/bin/weft"])
if cmd_argv:
    check_flags("Dockerfile CMD", cmd_argv)
    host, port = listen_port(cmd_argv)
    check("Dockerfile: CMD serves on all addresses at the EXPOSEd port",
          host == "0.0.0.0" and expose == [port], (host, port, expose))
    health = [l for l in lines if l.startswith("HEALTHCHECK ")]
    url = re.search(r"http://127\.0\.0\.1:(\d+)(/\S*)", health[0]) if health else None
    check("Dockerfile: HEALTHCHECK asks the served port's /healthz, a GET route",
          url and int(url.group(1)) == port and url.group(2) == "/healthz" and
          "/healthz" in routes)
ignore = open(os.path.join(top, "deploy/Dockerfile.dockerignore")).read().split()
check("Dockerfile.dockerignore leaves out .git and the build directories",
      ".git" in ignore and "build" in ignore and "build-*" in ignore)
sys.exit(1 if failed else 0)
EOF
rc=$?
cat "$E2E_TMP/static.log"
check "manifests, units and Dockerfile agree with the server (lines above)" test $rc -eq 0

if command -v kubectl >/dev/null 2>&1; then
    kubectl kustomize "$TOP/deploy/k8s" >"$E2E_TMP/kustomized.yaml" 2>"$E2E_TMP/kustomize.log"
    check "kubectl kustomize deploy/k8s builds (offline)" test $? -eq 0
else
    echo "SKIP kubectl kustomize: kubectl is not installed"
fi

# ---- the CronJob's script against temporary directories ----
# The pod's paths (/etc/weft, /var/lib/weft, /exports) are moved under $R; `weft` on PATH is
# the binary under test; [train] gets 5 epochs so that the run takes a second.
R="$E2E_TMP/pod"
mkdir -p "$R/etc/weft" "$R/var/lib/weft/input" "$R/exports" "$R/bin"
ln -s "$WEFT" "$R/bin/weft"
cp "$TOP/tests/data/cora/edges.tsv" "$R/var/lib/weft/input/edges.tsv"
sed -e "s|/var/lib/weft|$R/var/lib/weft|g" "$X/worker.conf" >"$R/etc/weft/worker.conf"
printf 'epochs = 5\n' >>"$R/etc/weft/worker.conf"
pod_env() {
    sed -e "s|=/etc/weft|=$R/etc/weft|; s|=/var/lib/weft|=$R/var/lib/weft|; s|=/exports|=$R/exports|" \
        "$X/cronjob.env"
}
run_cronjob() {   # run_cronjob LOG [NAME=VALUE...]
    log=$1
    shift
    # shellcheck disable=SC2046 # NAME=VALUE lines without spaces
    env $(pod_env) "$@" PATH="$R/bin:$PATH" sh -c "$(cat "$X/cronjob.sh")" >"$log" 2>&1
}
touch "$R/exports/weft-20000101T000000Z-v7.snap" "$R/exports/README"
run_cronjob "$E2E_TMP/cron1.log"
check "CronJob script: exit 0" test $? -eq 0
first=$(ls "$R/exports" | grep -E '^weft-[0-9]{8}T[0-9]{6}Z-v1\.snap$')
check "CronJob script: exports the live version as weft-<created>-v1.snap" test -n "$first"
check "CronJob script: nothing left under a temporary name" \
    sh -c "! ls '$R/exports' | grep -q tmp"
check "CronJob script: the export imports (a complete snapshot file)" \
    "$WEFT" snapshots import "$R/exports/$first" --store "$E2E_TMP/check-import"
run_cronjob "$E2E_TMP/cron2.log" WEFT_EXPORTS_KEEP=1
check "CronJob script, unchanged inputs: no new training, the export is there already" \
    sh -c "grep -q 'is there already' '$E2E_TMP/cron2.log' && ! grep -q 'training (' '$E2E_TMP/cron2.log'"
check "CronJob script, WEFT_EXPORTS_KEEP=1: the older export removed, other files left alone" \
    test "$(ls "$R/exports" | tr '\n' ' ')" = "README $first "
rm -f "$R/exports/README"

# ---- the sync sidecar's and the server's own argument lists ----
sync_args=$(sed -e "s|^/exports$|$R/exports|; s|^/var/lib/weft/store$|$R/serve-store|" "$X/sync.args")
# shellcheck disable=SC2086 # one argument per line, none with spaces
"$WEFT" $sync_args --once >"$E2E_TMP/sync.log" 2>&1
check "sync sidecar's arguments (+ --once): exit 0" test $? -eq 0
check "sync sidecar: imported the export and made it live" \
    grep -q "version 1 is live: $first" "$E2E_TMP/sync.log"
PORT=$(free_port)
serve_args=$(sed -e "s|^/var/lib/weft/store$|$R/serve-store|; s|^0\.0\.0\.0:|127.0.0.1:|; s|:[0-9]*$|:$PORT|" \
    "$X/serve.args")
# shellcheck disable=SC2086
"$WEFT" $serve_args >"$E2E_TMP/serve-pod.log" 2>&1 &
SERVER_PID=$!
BASE="http://127.0.0.1:$PORT"
i=0
until curl -fsS "$BASE/readyz" >/dev/null 2>&1 || [ $i -ge 100 ]; do sleep 0.1; i=$((i + 1)); done
check "server's arguments: ready on the synced store" curl -fsS -o /dev/null "$BASE/readyz"
check "server's arguments: serves version 1" sh -c "curl -fsS '$BASE/healthz' | grep -q '\"version\":1[,}]'"
stop_server

# ---- systemd ----
if command -v systemd-analyze >/dev/null 2>&1; then
    S="$E2E_TMP/sysroot"
    mkdir -p "$S/usr/local/bin" "$S/etc/systemd/system" "$S/usr/lib/systemd"
    for d in /usr/lib/systemd/system /lib/systemd/system; do
        [ -d "$d" ] && { cp -a "$d" "$S/usr/lib/systemd/"; break; }
    done
    cp "$WEFT" "$S/usr/local/bin/weft"
    cp "$UNITS"/*.service "$S/etc/systemd/system/"
    systemd-analyze verify --root="$S" --man=no --generators=no \
        weft-serve.service weft-worker.service >"$E2E_TMP/verify.log" 2>&1
    rc=$?
    cat "$E2E_TMP/verify.log"
    check "systemd-analyze verify: both units, no complaint" \
        sh -c "[ $rc -eq 0 ] && [ ! -s '$E2E_TMP/verify.log' ]"
    sed 's|^ExecStart=/usr/local/bin/weft|ExecStart=/usr/local/bin/no-such-weft|' \
        "$UNITS/weft-serve.service" >"$S/etc/systemd/system/weft-broken.service"
    systemd-analyze verify --root="$S" --man=no --generators=no weft-broken.service \
        >/dev/null 2>&1
    check "systemd-analyze verify fails a unit whose binary is missing (the check can fail)" \
        test $? -ne 0
    if command -v systemd-sysusers >/dev/null 2>&1; then
        mkdir -p "$S/etc"
        systemd-sysusers --root="$S" "$UNITS/weft.sysusers" >/dev/null 2>&1
        check "weft.sysusers creates the user weft, no login, home /var/lib/weft" \
            grep -q '^weft:x:[0-9]*:[0-9]*:[^:]*:/var/lib/weft:/usr/sbin/nologin$' "$S/etc/passwd"
    fi
    for u in weft-serve weft-worker; do
        exposure=$(systemd-analyze security --offline=true --root="$S" "$u.service" 2>/dev/null |
            sed -n 's/.*Overall exposure level for [^:]*: \([0-9.]*\).*/\1/p')
        echo "systemd-analyze security: $u.service exposure ${exposure:-?} (0 safest, 10 unsafe)"
        check "$u.service: exposure at most 2.0 (systemd-analyze security)" \
            $PY -c "import sys; sys.exit(not (sys.argv[1] and float(sys.argv[1]) <= 2.0))" "${exposure:-}"
    done
else
    echo "SKIP systemd-analyze verify: systemd-analyze is not installed"
fi

# ---- Docker ----
if command -v dpkg >/dev/null 2>&1; then
    # The Dockerfile's derivation of the runtime packages, run on the binary under test
    # (a file no package holds is marked UNOWNED here; the Dockerfile would drop it).
    { ldd "$WEFT" | awk '/=> \//{print $3}'; echo /usr/bin/curl; } | xargs readlink -f | sort -u |
        while read -r f; do dpkg -S "$f" 2>/dev/null || dpkg -S "${f#/usr}" 2>/dev/null ||
            echo "UNOWNED $f:"; done |
        cut -d: -f1 | sort -u >"$E2E_TMP/runtime-packages"
    echo "runtime packages: $(tr '\n' ' ' <"$E2E_TMP/runtime-packages")"
    check "Dockerfile's runtime packages: found for weft's libraries and curl" \
        sh -c "grep -qx libc6 '$E2E_TMP/runtime-packages' && grep -qx libjansson4 '$E2E_TMP/runtime-packages' && grep -qx liblmdb0 '$E2E_TMP/runtime-packages' && grep -qx curl '$E2E_TMP/runtime-packages'"
    check "Dockerfile's runtime packages: every library of weft belongs to one" \
        sh -c "! grep -q UNOWNED '$E2E_TMP/runtime-packages'"
else
    echo "SKIP the Dockerfile's runtime package list: no dpkg here"
fi
if docker info >/dev/null 2>&1 && docker build --help 2>/dev/null | grep -q -- '--check'; then
    docker build --check -f "$TOP/deploy/Dockerfile" "$TOP" >"$E2E_TMP/docker.log" 2>&1
    rc=$?
    cat "$E2E_TMP/docker.log"
    check "docker build --check deploy/Dockerfile" test $rc -eq 0
else
    echo "SKIP docker build --check: no Docker daemon or no --check here (the Dockerfile was checked statically above)"
fi
finish
