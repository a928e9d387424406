#!/bin/sh
# make install into a temporary DESTDIR: every file lands with its mode, weft.pc builds a small
# program against libweft (its figures checked against tests/data/README.md), the man pages
# render without warnings, weft --version agrees with weft.pc, every subcommand's --help
# exits 0 and gives each option that takes a value a default (or says it is required), and
# the man page documents every option of every subcommand. Then make uninstall.
# Installs what $BUILD holds (make runs with the same BUILD, so nothing is built elsewhere).
. "$TOP/tests/e2e/lib.sh"

# Subcommands whose help texts are being reworked elsewhere: their options without a
# default are printed as notes, not failures. Empty it once they show every default.
HELP_DEFAULTS_PENDING=${HELP_DEFAULTS_PENDING-}

ROOT="$E2E_TMP/root"
P=/usr/local
# BUILD as the Makefile's own dependency files name it (relative to the tree when inside it).
case "$BUILD" in
    "$TOP"/*) build_arg=${BUILD#"$TOP"/} ;;
    *) build_arg=$BUILD ;;
esac
version=$(awk '$2 ~ /^WEFT_VERSION_(MAJOR|MINOR|PATCH)$/ {v = v s $3; s = "."} END {print v}' \
    "$TOP/include/weft/version.h")

make_in_tree() {
    make -C "$TOP" --no-print-directory BUILD="$build_arg" "$@" >>"$E2E_TMP/make.log" 2>&1
}
check "make install DESTDIR PREFIX=$P" make_in_tree install DESTDIR="$ROOT" PREFIX="$P"
tail -n 20 "$E2E_TMP/make.log"

# ---- the files and their modes ----

mode_is() {   # mode_is MODE FILE
    [ -e "$2" ] || { echo "missing: $2"; return 1; }
    m=$(stat -c %a "$2")
    [ "$m" = "$1" ] || { echo "$2: mode $m, expected $1"; return 1; }
}
check "bin/weft 755" mode_is 755 "$ROOT$P/bin/weft"
check "lib/libweft.a 644" mode_is 644 "$ROOT$P/lib/libweft.a"
check "lib/pkgconfig/weft.pc 644" mode_is 644 "$ROOT$P/lib/pkgconfig/weft.pc"
check "share/man/man1/weft.1 644" mode_is 644 "$ROOT$P/share/man/man1/weft.1"
check "share/man/man5/weft-worker.conf.5 644" mode_is 644 \
    "$ROOT$P/share/man/man5/weft-worker.conf.5"

headers_ok() {
    n=0
    for h in "$TOP"/include/weft/*.h; do
        dst="$ROOT$P/include/weft/$(basename "$h")"
        mode_is 644 "$dst" && cmp -s "$h" "$dst" || { echo "header $dst differs or is missing"; return 1; }
        n=$((n + 1))
    done
    installed=$(find "$ROOT$P/include/weft" -type f | wc -l)
    [ "$installed" -eq "$n" ] || { echo "$installed headers installed, $n in the tree"; return 1; }
}
check "every public header, 644, identical" headers_ok

dirs_ok() {
    bad=$(find "$ROOT" -type d ! -perm 755)
    [ -z "$bad" ] || { echo "directories not 755: $bad"; return 1; }
    stray=$(find "$ROOT" -type f ! -path "$ROOT$P/*")
    [ -z "$stray" ] || { echo "files outside PREFIX: $stray"; return 1; }
}
check "directories 755, nothing outside PREFIX" dirs_ok
check "the binary installed is the one built" cmp -s "$BUILD/weft" "$ROOT$P/bin/weft"
no_placeholder() { ! grep -n '@[A-Z]*@' "$@"; }
check "weft.pc and man pages have no @PLACEHOLDER@ left" no_placeholder \
    "$ROOT$P/lib/pkgconfig/weft.pc" "$ROOT$P/share/man/man1/weft.1" \
    "$ROOT$P/share/man/man5/weft-worker.conf.5"

# ---- pkg-config, and a program built against the installed libweft ----

PKG_CONFIG_SYSROOT_DIR=$ROOT
PKG_CONFIG_PATH=$ROOT$P/lib/pkgconfig
export PKG_CONFIG_SYSROOT_DIR PKG_CONFIG_PATH
check "weft.pc validates" pkg-config --validate weft
pc_version=$(pkg-config --modversion weft)
check "weft.pc version $pc_version is include/weft/version.h's $version" \
    test "$pc_version" = "$version"
libs=$(pkg-config --libs --static weft)
cflags=$(pkg-config --cflags weft)
has_all() {   # has_all TEXT WORD...: every WORD is a word of TEXT
    text=" $1 "
    shift
    for w in "$@"; do
        case "$text" in *" $w "*) ;; *) echo "'$w' missing from: $text"; return 1 ;; esac
    done
}
check "cflags name the staged include dir" has_all "$cflags" "-I$ROOT$P/include"
check "static libs: libweft and every library it uses" has_all "$libs" "-L$ROOT$P/lib" \
    -lweft -ljansson -llmdb -lopenblas -lnettle -lz -lpthread -lm
libs_shared=$(echo $(pkg-config --libs weft))
check "shared libs: -L and -lweft only" test "$libs_shared" = "-L$ROOT$P/lib -lweft"

cat >"$E2E_TMP/prog.c" <<'EOF'
/* Built by tests/e2e/test_install.sh against the installed libweft. */
#include <stdio.h>

#include <weft/graph.h>
#include <weft/store.h>
#include <weft/topk.h>
#include <weft/version.h>

int main(int argc, char **argv)
{
    if (argc != 3) {
        fprintf(stderr, "usage: prog EDGES STORE\n");
        return 2;
    }
    weft_error err = { WEFT_OK, "" };
    weft_graph *g = NULL;
    weft_graph_stats st;
    if (weft_graph_new(WEFT_GRAPH_UNDIRECTED, &g, &err) != WEFT_OK ||
        weft_graph_load_edges(g, argv[1], &err) != WEFT_OK ||
        weft_graph_finalize(g, &err) != WEFT_OK ||
        weft_graph_stats_compute(g, &st, &err) != WEFT_OK) {
        fprintf(stderr, "prog: %s\n", err.msg);
        weft_graph_free(g);
        return 1;
    }
    printf("nodes %zu edges %zu degree_max %zu components %zu\n", st.n_nodes, st.n_edges,
           st.degree_max, st.n_components);
    weft_graph_free(g);

    const float scores[] = { 0.5f, 2.0f, -1.0f, 3.0f, 1.0f };
    uint32_t id[2];
    float best[2];
    size_t n = weft_topk_select(scores, 5, 2, id, best);
    printf("top %zu: %u %u\n", n, (unsigned)id[0], (unsigned)id[1]);

    weft_store *s = NULL;
    json_t *all = NULL;
    if (weft_store_open(argv[2], WEFT_STORE_CREATE, 0, &s, &err) != WEFT_OK ||
        weft_store_list(s, &all, &err) != WEFT_OK) {
        fprintf(stderr, "prog: %s\n", err.msg);
        weft_store_close(s);
        return 1;
    }
    printf("snapshots %zu\n", json_array_size(all));
    json_decref(all);
    weft_store_close(s);
    printf("version %s %s\n", WEFT_VERSION, weft_version_string());
    return 0;
}
EOF
# LDFLAGS: make check-asan links everything with the sanitizers, libweft.a included.
# shellcheck disable=SC2086
check "cc prog.c \$(pkg-config --cflags --libs --static weft)" \
    cc -std=c11 -Wall -Wextra -Wpedantic -Werror -o "$E2E_TMP/prog" "$E2E_TMP/prog.c" \
    $(pkg-config --cflags --libs --static weft) ${LDFLAGS:-}
"$E2E_TMP/prog" "$TOP/tests/data/karate/edges.tsv" "$E2E_TMP/store" >"$E2E_TMP/prog.out" 2>&1
cat "$E2E_TMP/prog.out"
# karate: 34 nodes, 78 distinct edges, degree max 17, one component (tests/data/README.md);
# the top 2 of the five scores are ids 3 (3.0) and 1 (2.0); a new store holds no snapshot.
printf 'nodes 34 edges 78 degree_max 17 components 1\ntop 2: 3 1\nsnapshots 0\nversion %s %s\n' \
    "$version" "$version" >"$E2E_TMP/prog.expect"
check "the program's output: karate counts, top-k, empty store, version" \
    cmp -s "$E2E_TMP/prog.out" "$E2E_TMP/prog.expect"
unset PKG_CONFIG_SYSROOT_DIR PKG_CONFIG_PATH

# ---- the man pages ----

man_clean() {   # man_clean PAGE: renders, no warning, the version in the footer
    warn=$(groff -man -Tutf8 -ww -z "$1" 2>&1) && [ -z "$warn" ] ||
        { echo "groff: $warn"; return 1; }
    out=$(MANPAGER=cat PAGER=cat MANWIDTH=80 man --warnings -l "$1" 2>"$E2E_TMP/man.err") ||
        { cat "$E2E_TMP/man.err"; return 1; }
    [ ! -s "$E2E_TMP/man.err" ] || { cat "$E2E_TMP/man.err"; return 1; }
    printf '%s\n' "$out" | grep -q "weft $version" || { echo "no 'weft $version' in $1"; return 1; }
}
if command -v man >/dev/null 2>&1 && command -v groff >/dev/null 2>&1; then
    check "man -l weft.1: no warnings" man_clean "$ROOT$P/share/man/man1/weft.1"
    check "man -l weft-worker.conf.5: no warnings" man_clean \
        "$ROOT$P/share/man/man5/weft-worker.conf.5"
else
    echo "SKIP man page rendering: man or groff is not installed"
fi

# ---- weft --version, --help and every subcommand's help ----

W="$ROOT$P/bin/weft"
first=$("$W" --version | head -n 1)
check "weft --version: 'weft $pc_version' (weft.pc's)" test "$first" = "weft $pc_version"
"$W" --help >"$E2E_TMP/help.txt"
check "weft --help exits 0" test $? -eq 0
exit_table() {
    for code in 0 1 2 3; do
        grep -q "^  $code  " "$E2E_TMP/help.txt" || { echo "no exit status $code"; return 1; }
    done
    grep -q "COMMAND --help" "$E2E_TMP/help.txt"
}
check "weft --help: exit status table, points at COMMAND --help" exit_table
"$W" >/dev/null 2>&1
check "weft without a command: exit 2" test $? -eq 2
"$W" no-such-command >/dev/null 2>&1
check "unknown command: exit 2" test $? -eq 2
"$W" inspect --no-such-option x >/dev/null 2>&1
check "unknown option: exit 2" test $? -eq 2

subs=$(awk '/^commands:/ {on = 1; next} on && NF == 0 {exit} on {print $1}' "$E2E_TMP/help.txt")
check "weft --help lists subcommands" test -n "$subs"

# Options that take a value ("  --name VALUE" or "  --name [V,]T") whose description, with its
# more indented continuation lines, says neither "default" nor "required".
without_default() {
    awk '
    function flush() { if (flag != "" && !ok) print flag; flag = "" }
    function indent(s) { match(s, /[^ ]/); return RSTART }
    /^ +--[a-z][a-z0-9-]*[ =]+[A-Z[]/ {
        flush(); flag = $1; ok = /default|required/; depth = indent($0); next
    }
    flag != "" && /^ +[^ -]/ && indent($0) > depth + 2 { if (/default|required/) ok = 1; next }
    { flush() }
    END { flush() }' "$1"
}
# The man page section of a subcommand, with \- turned into -.
man_section() {
    sed 's/\\-/-/g' "$ROOT$P/share/man/man1/weft.1" |
        awk -v sub_="$1" '
        /^\.S[SH] / { on = index($0, "\"weft " sub_ " ") == 5 || $0 == ".SS \"weft " sub_ "\"" }
        on'
}
help_ok() {   # help_ok SUB
    "$W" "$1" --help >"$E2E_TMP/sub.txt" 2>&1 || { echo "weft $1 --help: exit $?"; return 1; }
    [ -s "$E2E_TMP/sub.txt" ] || { echo "weft $1 --help printed nothing"; return 1; }
    missing=$(without_default "$E2E_TMP/sub.txt")
    if [ -n "$missing" ]; then
        case " $HELP_DEFAULTS_PENDING " in
            *" $1 "*) echo "note: weft $1 --help (pending): no default shown for:" $missing ;;
            *) echo "weft $1 --help: no default shown for:" $missing; return 1 ;;
        esac
    fi
    man_section "$1" >"$E2E_TMP/sub.man"
    [ -s "$E2E_TMP/sub.man" ] || { echo "weft.1 has no section for weft $1"; return 1; }
    undocumented=""
    for opt in $(grep -o -- '--[a-z][a-z0-9-]*' "$E2E_TMP/sub.txt" | sort -u); do
        [ "$opt" = "--help" ] && continue
        grep -Eq -- "$opt([^a-z0-9-]|\$)" "$E2E_TMP/sub.man" || undocumented="$undocumented $opt"
    done
    [ -z "$undocumented" ] || { echo "weft.1 lacks for weft $1:$undocumented"; return 1; }
}
for sub in $subs; do
    check "weft $sub --help: exit 0, every default shown, every option in weft.1" help_ok "$sub"
done

# ---- another PREFIX, then uninstall ----

check "make install PREFIX=/opt/weft" make_in_tree install DESTDIR="$E2E_TMP/opt" PREFIX=/opt/weft
check "PREFIX=/opt/weft: files under it" test -x "$E2E_TMP/opt/opt/weft/bin/weft"
check "PREFIX=/opt/weft: weft.pc says so" grep -qx 'prefix=/opt/weft' \
    "$E2E_TMP/opt/opt/weft/lib/pkgconfig/weft.pc"
check "make uninstall" make_in_tree uninstall DESTDIR="$ROOT" PREFIX="$P"
left=$(find "$ROOT" -type f)
check "uninstall leaves no file" test -z "$left"
[ -z "$left" ] || echo "left: $left"

finish
