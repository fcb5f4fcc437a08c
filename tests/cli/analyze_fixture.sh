#!/bin/sh
# Regenerates analyze_stage.csv (time and load current only) from analyze_stage.ini.
# Usage: sh tests/cli/analyze_fixture.sh TANKFIT
set -eu
here=$(cd "$(dirname "$0")" && pwd)
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
"$1" synth "$here/analyze_stage.ini" -o "$tmp/full.csv"
cut -d, -f1,2 "$tmp/full.csv" > "$here/analyze_stage.csv"
