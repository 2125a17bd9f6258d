"""Counts test cases in meson's testlog.json: each TAP line 'ok'/'not ok' is one case
('# SKIP' counts as skipped); a test binary that failed without reporting any case counts as
one failure. Prints 'N passed, N failed, N skipped' and exits 1 when anything failed."""
import json
import re
import sys

passed = failed = skipped = 0
try:
    lines = open(sys.argv[1], encoding="utf-8").read().splitlines()
except OSError as e:
    print(f"no test log: {e}", file=sys.stderr)
    print("0 passed, 1 failed")
    sys.exit(1)
for line in lines:
    if not line.strip():
        continue
    entry = json.loads(line)
    out = entry.get("stdout") or ""
    cases = entry_failed = 0
    for tap in out.splitlines():
        m = re.match(r"^(not ok|ok)\b", tap)
        if not m:
            continue
        cases += 1
        if re.search(r"#\s*SKIP", tap, re.I):
            skipped += 1
        elif m.group(1) == "ok" or re.search(r"#\s*TODO", tap, re.I):
            passed += 1
        else:
            failed += 1
            entry_failed += 1
    result = entry.get("result", "")
    if cases == 0:
        if result in ("OK", "EXPECTEDFAIL"):
            passed += 1
        elif result == "SKIP":
            skipped += 1
        else:
            failed += 1
    elif result not in ("OK", "SKIP", "EXPECTEDFAIL") and entry_failed == 0:
        failed += 1  # crashed or timed out after its last reported case
print(f"{passed} passed, {failed} failed, {skipped} skipped")
sys.exit(1 if failed else 0)
