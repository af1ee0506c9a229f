# Shared helpers for the end-to-end tests (sourced, not run by ctest: it has no test of its own).
set -u
: "${CS_BIN:?CS_BIN must point at the collshift binary}"
: "${CS_SOURCE_DIR:?CS_SOURCE_DIR must point at the source tree}"
TMP=$(mktemp -d)
trap 'rm -rf "$TMP"' EXIT
pass=0 fail=0
ok() { pass=$((pass + 1)); }
bad() { fail=$((fail + 1)); printf 'FAIL: %s\n' "$*" >&2; }
# expect_code CODE CMD...: run, keep stdout/stderr in $TMP/out, $TMP/err
expect_code() {
  local want=$1; shift
  "$@" >"$TMP/out" 2>"$TMP/err"
  local got=$?
  if [ "$got" = "$want" ]; then ok; else bad "exit $got, wanted $want: $* ($(head -c 300 "$TMP/err"))"; fi
}
expect_in() { # expect_in FILE TEXT
  if grep -qF -- "$2" "$1"; then ok; else bad "'$2' not in $1: $(head -c 400 "$1")"; fi
}
finish() {
  printf '%d passed, %d failed\n' "$pass" "$fail"
  [ "$fail" = 0 ]
}
