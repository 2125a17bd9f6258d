#!/usr/bin/env bash
# The README's test command: installs what the tests need (Debian packages), builds, runs
# every test (unit, reference, data, gimp suites) and ends with the line
# "N passed, N failed, N skipped" counted from the real run (each TAP test case counts).
set -uo pipefail
# Messages name sizes as 999×960: a UTF-8 locale keeps GLib from printing '?' for '×'.
export LC_ALL=C.UTF-8
here=$(cd "$(dirname "$0")/.." && pwd)
bash "$here/tools/deps.sh" test || exit 1
bash "$here/tools/build.sh" || { echo "0 passed, 1 failed"; exit 1; }
build=${RETE_BUILD_DIR:-$here/build}
rm -f "$build/meson-logs/testlog.json"
meson test -C "$build" --print-errorlogs --num-processes 2 "$@"
status=$?
/usr/bin/python3 "$here/tools/count-tests.py" "$build/meson-logs/testlog.json"
count_status=$?
[ $status -eq 0 ] && [ $count_status -eq 0 ]
