#!/bin/sh
# Runs one golden CLI case (format in tests/cli/README.md) against the tankfit binary.
# Usage: golden.sh CASE-FILE TANKFIT
case_file=$1
cli=$2
args=$(sed -n 's/^args: //p' "$case_file")
want_exit=$(sed -n 's/^exit: //p' "$case_file")
out=$(mktemp) err=$(mktemp)
trap 'rm -f "$out" "$err"' EXIT
# shellcheck disable=SC2086
eval "set -- $args"
"$cli" "$@" >"$out" 2>"$err"
got_exit=$?
fail=0
if [ "$got_exit" != "$want_exit" ]; then
  echo "FAIL $case_file: exit $got_exit, expected $want_exit"; fail=1
fi
while IFS= read -r line; do
  case "$line" in
    "stdout: "*) frag=${line#stdout: }
      grep -qF -- "$frag" "$out" || { echo "FAIL $case_file: stdout lacks '$frag'"; fail=1; } ;;
    "stderr: "*) frag=${line#stderr: }
      grep -qF -- "$frag" "$err" || { echo "FAIL $case_file: stderr lacks '$frag'"; fail=1; } ;;
  esac
done < "$case_file"
if [ $fail -ne 0 ]; then
  echo "--- stdout"; cat "$out"; echo "--- stderr"; cat "$err"
  exit 1
fi
echo "PASS $case_file"
