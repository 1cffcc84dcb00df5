#!/usr/bin/env bash
# SHA-256 of files of many lengths (0..300 bytes around the 55/56/64-byte padding edges, and 1 MB)
# against python hashlib (Python standard library) and coreutils sha256sum. Skipped (77) without python3.
set -u
. "$(dirname "$0")/lib.sh"
prog="$1"
py=/usr/bin/python3
[ -x "$py" ] || py=$(command -v python3 || true)
[ -n "$py" ] || skip "python3 missing"
"$py" - "$tmp" <<'PY' || bail "python3 could not write the files"
import hashlib, os, random, sys
d = sys.argv[1]
r = random.Random(2026)
sizes = list(range(0, 300)) + [4095, 4096, 65535, 65536, 65537, 1000003]
with open(os.path.join(d, "expected"), "w") as out:
    for n in sizes:
        b = bytes(r.getrandbits(8) for _ in range(n)) if n < 70000 else os.urandom(n)
        p = os.path.join(d, "f%d" % n)
        open(p, "wb").write(b)
        out.write("%s %s\n" % (p, hashlib.sha256(b).hexdigest()))
PY
count=0
while read -r path want; do
    name=${path##*/}
    got=$("$prog" --file "$path") || { fail "$name: program failed"; continue; }
    [ "$got" = "$want" ] && pass "$name: hashlib digest" || fail "$name: got $got want $want (hashlib)"
    if command -v sha256sum >/dev/null; then
        ref=$(sha256sum "$path" | cut -d' ' -f1)
        [ "$got" = "$ref" ] && pass "$name: sha256sum digest" || fail "$name: got $got want $ref (sha256sum)"
    fi
    count=$((count + 1))
done < "$tmp/expected"
echo "$count files compared with hashlib and sha256sum"
finish
