#!/usr/bin/env bash
# Writes one gzipped manual page from `residue [SUBCOMMAND] --help` with Debian's help2man.
# Usage: make_manpage.sh RESIDUE_BINARY SUBCOMMAND|- VERSION INCLUDE.h2m OUTPUT.1.gz
set -euo pipefail
bin=$1 sub=$2 version=$3 include=$4 out=$5
[ "$sub" = "-" ] && sub=""
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
name=residue${sub:+-$sub}
# A wrapper named like the page, so that help2man's NAME reads residue-scan; `exec -a` makes the
# usage lines say "residue" rather than the build folder's path.
printf '#!/bin/bash\nexec -a residue "%s" %s "$@"\n' "$bin" "$sub" > "$tmp/$name"
chmod +x "$tmp/$name"
# sed reads the whole help: `head -1` would exit after one line, and a long help still being
# written would then die of SIGPIPE (exit 141, fatal under pipefail).
what=$("$tmp/$name" --help | sed -n 1p)
what=${what#residue: }
help2man --no-info --no-discard-stderr --section=1 --version-string="$version" --name="$what" \
  --include="$include" --output="$tmp/$name.1" "$tmp/$name"
gzip -9n -c "$tmp/$name.1" > "$out.tmp"
mv "$out.tmp" "$out"
