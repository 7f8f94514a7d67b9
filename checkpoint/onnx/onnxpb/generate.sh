#!/usr/bin/env bash
# Regenerates onnx.pb.go, the Go types of the ONNX model format, from
# onnx.proto: the schema as Debian's python3-onnx package ships it
# (onnx/onnx.proto of ONNX 1.12.0, IR version 8, with its licence header).
# `make onnx-proto` runs this. It needs protoc (Debian's protobuf-compiler)
# and installs protoc-gen-go at the version of google.golang.org/protobuf
# that go.mod requires, so the generated code matches its runtime.
#
# The schema is taken afresh from the Debian package when apt-get can
# download it, and the committed copy is replaced if it differs; without
# apt-get the committed copy is used.
set -euo pipefail
here=$(cd "$(dirname "$0")" && pwd)
root=$(cd "$here/../../.." && pwd)
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT

if command -v apt-get >/dev/null 2>&1 && (cd "$tmp" && apt-get download python3-onnx >/dev/null 2>&1); then
	dpkg -x "$tmp"/python3-onnx_*.deb "$tmp/deb"
	schema=$(find "$tmp/deb" -path '*/onnx/onnx.proto' | head -n 1)
	if ! cmp -s "$schema" "$here/onnx.proto"; then
		echo "onnx-proto: the schema in $(basename "$tmp"/python3-onnx_*.deb) differs from the committed onnx.proto; replacing it" >&2
		cp "$schema" "$here/onnx.proto"
	fi
else
	echo "onnx-proto: could not download Debian's python3-onnx; using the committed onnx.proto" >&2
fi

command -v protoc >/dev/null 2>&1 || {
	echo "onnx-proto: protoc is not installed (install Debian's protobuf-compiler: apt-get install protobuf-compiler)" >&2
	exit 1
}
version=$(cd "$root" && go list -m -f '{{.Version}}' google.golang.org/protobuf)
GOBIN="$tmp/bin" go install "google.golang.org/protobuf/cmd/protoc-gen-go@$version"
PATH="$tmp/bin:$PATH" protoc -I "$here" --go_out="$here" --go_opt=paths=source_relative \
	--go_opt=Monnx.proto=weft/checkpoint/onnx/onnxpb onnx.proto
echo "onnx-proto: regenerated $here/onnx.pb.go with protoc $(protoc --version | cut -d' ' -f2) and protoc-gen-go $version"
