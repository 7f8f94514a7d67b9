// Package onnxtest runs exported models in ONNX Runtime for weft's tests:
// the npm package onnxruntime-node, installed by
// testdata/fetch-onnxruntime.sh (which `make test` runs) into a
// git-ignored cache, and run by Node.js with the scripts in
// checkpoint/onnx/testdata.
//
// The cache is $WEFT_ONNXRUNTIME when set, otherwise .cache/onnxruntime at
// the repository root. When node or the runtime is missing, a test is
// skipped with a message saying which and how to install it, except under
// CI (CI=true) or with WEFT_REQUIRE_ONNXRUNTIME=1, where it fails: CI must
// always run the runtime tests.
package onnxtest

import (
	"bytes"
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// Timeout bounds one run of a script.
const Timeout = 2 * time.Minute

// root returns the repository root (the folder with go.mod above the
// working directory), or "".
func root() string {
	wd, err := os.Getwd()
	if err != nil {
		return ""
	}
	for d := wd; ; d = filepath.Dir(d) {
		if _, err := os.Stat(filepath.Join(d, "go.mod")); err == nil {
			return d
		}
		if filepath.Dir(d) == d {
			return ""
		}
	}
}

// Dir returns the runtime's cache folder, or "" when it cannot be found.
func Dir() string {
	if d := os.Getenv("WEFT_ONNXRUNTIME"); d != "" {
		return d
	}
	if r := root(); r != "" {
		return filepath.Join(r, ".cache", "onnxruntime")
	}
	return ""
}

// Script returns the path of a script in checkpoint/onnx/testdata, such
// as "score_line.js".
func Script(t testing.TB, name string) string {
	t.Helper()
	p := filepath.Join(root(), "checkpoint", "onnx", "testdata", name)
	if _, err := os.Stat(p); err != nil {
		t.Fatalf("script %s: %v", name, err)
	}
	return p
}

// Runtime is a node executable with onnxruntime-node on its module path.
type Runtime struct {
	node    string
	modules string
}

// Find returns the runtime, or stops the test (skip, or fail under CI) when
// node or onnxruntime-node is missing. With -short (the race-detector pass
// of `make test`) it skips: the runtime runs in a subprocess, where the
// race detector sees nothing, and the full pass has run it already.
func Find(t testing.TB) *Runtime {
	t.Helper()
	if testing.Short() {
		t.Skip("runs ONNX Runtime in a subprocess; skipped with -short")
	}
	node, err := exec.LookPath("node")
	if err != nil {
		missing(t, "node (Node.js) is not installed; install Node.js and npm, then run testdata/fetch-onnxruntime.sh (make test does)")
	}
	modules := filepath.Join(Dir(), "node_modules")
	if _, err := os.Stat(filepath.Join(modules, "onnxruntime-node", "package.json")); err != nil {
		missing(t, "onnxruntime-node not found in "+modules+"; run testdata/fetch-onnxruntime.sh (make test does)")
	}
	return &Runtime{node: node, modules: modules}
}

func missing(t testing.TB, msg string) {
	t.Helper()
	if os.Getenv("CI") == "true" || os.Getenv("WEFT_REQUIRE_ONNXRUNTIME") == "1" {
		t.Fatal(msg)
	}
	t.Skip(msg)
}

// Run runs node with the script and arguments and returns its standard
// output; a failure (the runtime's message is on standard error) fails
// the test.
func (r *Runtime) Run(t testing.TB, script string, args ...string) []byte {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), Timeout)
	defer cancel()
	cmd := exec.CommandContext(ctx, r.node, append([]string{script}, args...)...)
	cmd.Env = append(os.Environ(), "NODE_PATH="+r.modules)
	var out, errb bytes.Buffer
	cmd.Stdout, cmd.Stderr = &out, &errb
	if err := cmd.Run(); err != nil {
		t.Fatalf("node %s %s: %v: %s", filepath.Base(script), strings.Join(args, " "), err, strings.TrimSpace(errb.String()))
	}
	return out.Bytes()
}
