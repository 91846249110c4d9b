#!/bin/sh
# Regenerate the QuTiP golden file into a temporary file and fail if any value
# differs from the committed sim/model/testdata/qutip_golden.json by more than
# 1e-6. Needs Debian's python3-qutip (/usr/bin/python3).
set -eu
here=$(cd "$(dirname "$0")" && pwd)
tmp=$(mktemp)
trap 'rm -f "$tmp"' EXIT
/usr/bin/python3 "$here/qutip_golden.py" "$tmp"
/usr/bin/python3 - "$here/../testdata/qutip_golden.json" "$tmp" <<'PY'
import json, sys
a = json.load(open(sys.argv[1]))["cases"]
b = json.load(open(sys.argv[2]))["cases"]
if len(a) != len(b):
    sys.exit(f"golden: committed file has {len(a)} cases, regenerated {len(b)}")
worst = 0.0
for i, (ca, cb) in enumerate(zip(a, b)):
    if ca["params"] != cb["params"]:
        sys.exit(f"golden: case {i} parameters differ: {ca['params']} vs {cb['params']}")
    for k, va in ca["result"].items():
        d = abs(va - cb["result"][k])
        worst = max(worst, d)
        if d > 1e-6:
            sys.exit(f"golden: case {i} {k}: committed {va!r}, regenerated {cb['result'][k]!r} (|diff| {d:.3g} > 1e-6)")
print(f"golden: {len(a)} cases agree, largest |diff| {worst:.3g}")
PY
