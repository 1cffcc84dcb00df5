#!/usr/bin/env bash
# Results folders are written whole or not at all, never over an input, never over a folder bandlink did
# not write, never through a symbolic link, checked before any work, and with the user's umask.
# Every case here once lost or misplaced a user's data (or would have): each check names what it guards.
set -u
. "$(dirname "$0")/lib.sh"

cp -r "$BL_SOURCE_ROOT/docs/examples/power" "$tmp/ex"
ex="$tmp/ex"
sums() { (cd "$ex" && find . -type f -not -path './results*' -not -path './out*' | sort | xargs sha256sum); }
before=$(sums)

# 1. fit/power/run with the output at the study's own folder: refused even with --force, inputs untouched.
for cmd in fit power run; do
    "$BANDLINK" "$cmd" "$ex/study.json" --out "$ex" --force --quiet 2>"$tmp/e"; rc=$?
    [ $rc -eq 2 ] && grep -q "holds an input" "$tmp/e" && pass "$cmd --out <study folder> --force: refused (exit 2)" \
        || fail "$cmd into the study folder: rc $rc $(cat "$tmp/e")"
done
sed 's/"output": "results"/"output": "."/' "$ex/study.json" > "$ex/dot.json"
"$BANDLINK" power "$ex/dot.json" --force --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && pass "power with \"output\": \".\": refused (exit 2)" || fail "output '.': rc $rc $(cat "$tmp/e")"
rm "$ex/dot.json"
[ "$(sums)" = "$before" ] && pass "inputs byte-identical after the refusals" || fail "an input changed"

# 2. --force replaces only what bandlink wrote.
mkdir -p "$tmp/u/thesis" && echo "chapter one" > "$tmp/u/thesis/ch1.tex" && echo "x" > "$tmp/u/power.csv"
"$BANDLINK" run "$ex/study.json" --out "$tmp/u" --force --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "thesis" "$tmp/e" && [ -s "$tmp/u/thesis/ch1.tex" ] \
    && pass "--force on a folder holding other files: refused naming one, files kept" \
    || fail "foreign folder: rc $rc $(cat "$tmp/e")"
"$BANDLINK" fit "$ex/study.json" --out "$tmp/r" --quiet || fail "fit into a new folder"
[ -f "$tmp/r/.bandlink-results" ] && grep -q '^fits.json$' "$tmp/r/.bandlink-results" \
    && pass "the results folder carries its marker listing what was written" || fail "no marker"
"$BANDLINK" run "$ex/study.json" --out "$tmp/r" --force --quiet 2>"$tmp/e" && [ -s "$tmp/r/report.html" ] \
    && pass "--force replaces a folder bandlink wrote" || fail "--force on own folder: $(cat "$tmp/e")"
echo "notes" > "$tmp/r/my-notes.txt"
"$BANDLINK" run "$ex/study.json" --out "$tmp/r" --force --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "my-notes.txt" "$tmp/e" && [ -s "$tmp/r/my-notes.txt" ] \
    && pass "a file added to a results folder blocks --force (named in the error)" || fail "added file: rc $rc $(cat "$tmp/e")"

# 3. Symbolic links and bad paths are refused before any work; nothing is created on bad input.
mkdir "$tmp/real" && ln -s "$tmp/real" "$tmp/link"
"$BANDLINK" fit "$ex/study.json" --out "$tmp/link" --force --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "symbolic link" "$tmp/e" && [ -L "$tmp/link" ] && [ -z "$(ls -A "$tmp/real")" ] \
    && pass "a symlinked --out is refused and left as it is" || fail "symlink: rc $rc $(cat "$tmp/e")"
ln -s "$tmp/nowhere" "$tmp/dangling"
start=$(date +%s%N)
"$BANDLINK" run "$ex/study.json" --out "$tmp/dangling" --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && grep -q "symbolic link" "$tmp/e" && [ ! -e "$tmp/nowhere" ] && ! ls "$tmp"/.dangling* >/dev/null 2>&1 \
    && pass "a dangling symlink --out is refused before the analysis" || fail "dangling: rc $rc $(cat "$tmp/e")"
printf 'rat,onset\n' > "$ex/bad.csv"
sed 's/"file": "trials.csv"/"file": "bad.csv"/' "$ex/study.json" > "$ex/bad.json"
"$BANDLINK" fit "$ex/bad.json" --out "$tmp/deep/a/b/c/results" --quiet 2>"$tmp/e"; rc=$?
[ $rc -eq 2 ] && [ ! -e "$tmp/deep" ] && pass "bad trial table: exit 2 and no output folders created" \
    || fail "bad table: rc $rc, deep exists: $([ -e "$tmp/deep" ] && echo yes || echo no)"
rm "$ex/bad.csv" "$ex/bad.json"

# 4. The user's umask is respected (077: nothing readable by others).
(umask 077 && "$BANDLINK" fit "$ex/study.json" --out "$tmp/private" --quiet) || fail "fit under umask 077"
modes=$(find "$tmp/private" -exec stat -c '%a' {} + | sort -u | tr '\n' ' ')

[ -z "$(find "$tmp/private" -perm /077)" ] && pass "umask 077: results are private (modes $modes)" \
    || fail "umask 077 ignored: $(find "$tmp/private" -perm /077 -exec stat -c '%a %n' {} + | head -3)"

# 5. A failure while writing (a full disk, simulated with ulimit -f) leaves the old set whole.
"$BANDLINK" fit "$ex/study.json" --out "$tmp/full" --quiet || fail "fit baseline"
old=$(cd "$tmp/full" && find . -type f | sort | xargs sha256sum)
(trap "" XFSZ; ulimit -f 8; "$BANDLINK" fit "$ex/study.json" --out "$tmp/full" --force --seed 3 --quiet) 2>"$tmp/e"; rc=$?
new=$(cd "$tmp/full" && find . -type f | sort | xargs sha256sum)
[ $rc -eq 1 ] && [ "$old" = "$new" ] && ! ls -a "$tmp" | grep -q partial \
    && pass "fit --force on a full disk: exit $rc, the old results byte-identical, no staging folder left" \
    || fail "full disk: rc $rc, changed: $([ "$old" = "$new" ] && echo no || echo yes)"

# 6. The provenance records absolute paths, so the study it records parses again from anywhere.
"$BANDLINK" fit "$ex/study.json" --out "$tmp/prov" --quiet || fail "fit for provenance"
python3 -c 'import json,sys; json.dump(json.load(open(sys.argv[1]))["study"], open(sys.argv[2], "w"))' \
    "$tmp/prov/provenance.json" "$tmp/prov-study.json"
(cd / && "$BANDLINK" check "$tmp/prov-study.json" >"$tmp/o" 2>"$tmp/e"); rc=$?
[ $rc -eq 0 ] && grep -q "trials       48, kept 48" "$tmp/o" \
    && pass "the study recorded in provenance.json parses again from another folder" || fail "provenance study: rc $rc $(cat "$tmp/e")"
python3 -c 'import json,sys; p=json.load(open(sys.argv[1])); sys.exit(0 if all(i["path"].startswith("/") for i in p["inputs"]) else 1)' \
    "$tmp/prov/provenance.json" && pass "every input path in the provenance is absolute" || fail "relative input paths"

finish
