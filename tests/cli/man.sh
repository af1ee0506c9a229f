#!/usr/bin/env bash
# End-to-end: the manual page is made from the same usage texts as --help: every line of the main
# help and of every command's help stands in it (after undoing roff escapes), and the page built
# with the tool equals what the tool writes now.
. "$(dirname "$0")/lib.bash"
: "${CS_BUILD_DIR:?}"
expect_code 0 "$CS_BIN" --man
cp "$TMP/out" "$TMP/man.1"
if cmp -s "$TMP/man.1" "$CS_BUILD_DIR/collshift.1"; then ok; else bad "build/collshift.1 differs from 'collshift --man'"; fi
# roff escapes used: \e for a backslash, \& before a leading '.', \- in the NAME line
sed -e 's/\\e/\\/g' -e 's/^\\&//' "$TMP/man.1" >"$TMP/man.txt"
"$CS_BIN" --help >"$TMP/help.txt"
for c in $("$CS_BIN" --help | sed -n '/^Commands:/,/^$/p' | awk 'NF>1 && $1 != "Commands:" {print $1}'); do
  "$CS_BIN" help "$c" >>"$TMP/help.txt"
done
missing=0
while IFS= read -r line; do
  [ -z "$line" ] && continue
  grep -qxF -- "$line" "$TMP/man.txt" || { missing=$((missing + 1)); [ $missing -le 3 ] && echo "not in man page: $line" >&2; }
done <"$TMP/help.txt"
[ "$missing" = 0 ] && ok || bad "$missing help lines are not in the manual page"
grep -q '^\.TH COLLSHIFT 1' "$TMP/man.1" && ok || bad "no .TH header"
# the installed page (cli/install.sh installs to a prefix; here only that the build rule made it)
[ -s "$CS_BUILD_DIR/collshift.1" ] && ok || bad "collshift.1 not built"
finish
