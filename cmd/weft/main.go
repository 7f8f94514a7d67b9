// Command weft trains recurrent networks (vanilla RNN, GRU, LSTM) that predict
// the next character or token of a sequence, on CPUs, and compares them with
// classical n-gram and Markov baselines on the same held-out text.
package main

import "os"

// version is set at build time by the Makefile (-ldflags -X main.version=...).
var version = "dev"

func main() {
	os.Exit(run(os.Args[1:], systemDeps()))
}
