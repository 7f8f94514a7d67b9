#!/usr/bin/env bash
# Installs ONNX Runtime for Node.js (the npm package onnxruntime-node, whose
# CPU libraries for Linux x64/arm64, macOS arm64 and Windows ship inside
# it) into a git-ignored cache, by default .cache/onnxruntime at the
# repository root, for the export tests of checkpoint/onnx and cmd/weft.
# Nothing is downloaded from anywhere but the npm registry: the package's
# install script, which would fetch optional GPU libraries from elsewhere,
# is not run. Skipped when already installed, so a second run costs nothing.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
dest=${WEFT_ONNXRUNTIME:-$root/.cache/onnxruntime}
version=1.30.0
[ -e "$dest/.complete-$version" ] && exit 0
command -v npm >/dev/null 2>&1 || {
	echo "fetch-onnxruntime: npm is not installed; it is needed to install onnxruntime-node (install Node.js and npm)" >&2
	exit 1
}
rm -rf "$dest"
mkdir -p "$dest"
npm install --prefix "$dest" --ignore-scripts --no-audit --no-fund --no-package-lock --no-save --silent "onnxruntime-node@$version"
touch "$dest/.complete-$version"
echo "onnxruntime-node $version ready in $dest"
