#!/usr/bin/env bash
# Regenerates the ONNX checker's verdict on the fixture models: rewrites
# testdata/models from the current exporter (go test -update), then runs
# checker.py with Debian's python3-onnx and writes testdata/checker.json.
# The tests never run Python; they read checker.json and check that the
# exporter still writes the models it judged. `make onnx-references` runs
# this; afterwards `git diff` shows what moved.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
py=/usr/bin/python3
if ! "$py" -c 'import onnx' 2>/dev/null; then
	if [ "$(id -u)" = 0 ]; then
		DEBIAN_FRONTEND=noninteractive apt-get update -q
		DEBIAN_FRONTEND=noninteractive apt-get install -y -q python3-onnx
	else
		echo "onnx references: Debian's python3-onnx is missing (install it with: sudo apt-get install python3-onnx)" >&2
		exit 1
	fi
fi
rm -f "$here"/models/*.onnx
(cd "$here/.." && go test -count=1 -run '^TestFixturesUpToDate$' -update .)
"$py" "$here/checker.py" >"$here/checker.json.tmp"
mv "$here/checker.json.tmp" "$here/checker.json"
echo "checker verdicts written to $here/checker.json; see git diff"
