// Command memtable prints issue 18's table: for each corpus size, the peak
// memory (getrusage's maximum resident set and, on Linux, the sampled peak
// of anonymous memory) and the time of weft prepare, train (a few steps of
// a tiny model), baselines and eval on a generated corpus. It is run by
// testdata/memory-table.sh, which builds weft first.
//
//	go run ./cmd/internal/memcheck/memtable -weft bin/weft 40MB 400MB
//
// Each corpus is generated in a temporary folder (-tmp, default the system's)
// and deleted with its run directory when its row is done. -json also
// writes one JSON object a line per corpus size to a file. With -generate
// FILE it only writes the corpus of its one size to FILE:
//
//	go run ./cmd/internal/memcheck/memtable -generate /tmp/corpus.txt 100MB
package main

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"os"
	"os/signal"
	"runtime"
	"strconv"
	"strings"
	"time"

	"weft/cmd/internal/memcheck"
	"weft/data/corpustest"
)

func main() {
	weft := flag.String("weft", "bin/weft", "the weft binary to measure")
	tmp := flag.String("tmp", "", "folder for the temporary corpora (default the system's temporary folder)")
	seed := flag.Uint64("seed", 1, "seed of the generated corpora")
	steps := flag.Int("steps", 20, "training steps")
	tokenizer := flag.String("tokenizer", "char", "data.tokenizer")
	limit := flag.String("kill", "0", "kill a verb whose resident set passes this size (e.g. 16GB; 0: no limit)")
	defaultLadder := flag.Bool("default-ladder", false, "fit the default baseline ladder (8-grams, five smoothers, a 32-state HMM) instead of the short one of memcheck.RunFile")
	generate := flag.String("generate", "", "only write the corpus of the one SIZE to this file (e.g. to time weft prepare on it)")
	jsonOut := flag.String("json", "", "also append one JSON object a line per corpus size to this file")
	flag.Usage = func() {
		fmt.Fprintf(os.Stderr, "usage: memtable [flags] SIZE...   (sizes such as 40MB, 400MB, 4GB; decimal units)\n")
		flag.PrintDefaults()
	}
	flag.Parse()
	if flag.NArg() == 0 {
		flag.Usage()
		os.Exit(2)
	}
	var sizes []int64
	for _, a := range flag.Args() {
		n, err := memcheck.ParseSize(a)
		if err != nil {
			fmt.Fprintf(os.Stderr, "memtable: %v\n", err)
			os.Exit(2)
		}
		sizes = append(sizes, n)
	}
	if *generate != "" {
		if len(sizes) != 1 {
			fmt.Fprintf(os.Stderr, "memtable: -generate takes one SIZE\n")
			os.Exit(2)
		}
		if err := corpustest.WriteFile(*generate, sizes[0], *seed); err != nil {
			fmt.Fprintf(os.Stderr, "memtable: %v\n", err)
			os.Exit(1)
		}
		return
	}
	kill, err := memcheck.ParseSize(*limit)
	if err != nil {
		fmt.Fprintf(os.Stderr, "memtable: -kill: %v\n", err)
		os.Exit(2)
	}
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()

	var out *os.File
	if *jsonOut != "" {
		if out, err = os.OpenFile(*jsonOut, os.O_CREATE|os.O_APPEND|os.O_WRONLY, 0o644); err != nil {
			fmt.Fprintf(os.Stderr, "memtable: %v\n", err)
			os.Exit(1)
		}
		defer out.Close()
	}
	load, _ := os.ReadFile("/proc/loadavg")
	fmt.Printf("weft %s, %s/%s, %d cores, load %s, %d training steps, %s tokenizer, %s baseline ladder\n\n",
		*weft, runtime.GOOS, runtime.GOARCH, runtime.NumCPU(), strings.TrimSpace(string(load)), *steps, *tokenizer, ladderName(*defaultLadder))
	fmt.Println("| corpus | prepare: max RSS, peak anon, time | train: max RSS, peak anon, time | baselines: max RSS, peak anon, time | eval: max RSS, peak anon, time |")
	fmt.Println("|---|---|---|---|---|")
	status := 0
	for _, size := range sizes {
		dir, err := os.MkdirTemp(*tmp, "weft-memtable-")
		if err != nil {
			fmt.Fprintf(os.Stderr, "memtable: %v\n", err)
			os.Exit(1)
		}
		m, err := memcheck.Measure(ctx, memcheck.Setup{
			Weft: []string{*weft}, Dir: dir, Size: size, Seed: *seed,
			Tokenizer: *tokenizer, Steps: *steps, DefaultLadder: *defaultLadder, Options: memcheck.Options{Limit: kill},
		})
		os.RemoveAll(dir)
		if err != nil {
			fmt.Fprintf(os.Stderr, "memtable: %s: %v\n", memcheck.FormatBytes(size), err)
			os.Exit(1)
		}
		row := []string{memcheck.FormatBytes(size)}
		for _, name := range memcheck.VerbNames {
			v := m.Verb(name)
			switch {
			case v == nil:
				row = append(row, "-")
			case v.Err != "":
				row = append(row, fmt.Sprintf("failed after %s (max RSS %s)", seconds(v.Peak.Wall), memcheck.FormatBytes(v.Peak.MaxRSS)))
			default:
				row = append(row, fmt.Sprintf("%s, %s, %s", memcheck.FormatBytes(v.Peak.MaxRSS), anon(v.Peak.PeakAnon), seconds(v.Peak.Wall)))
			}
		}
		fmt.Printf("| %s |\n", strings.Join(row, " | "))
		if f := m.Failed(); f != nil {
			fmt.Fprintf(os.Stderr, "memtable: %s: %s\n", memcheck.FormatBytes(size), f.Err)
			status = 1
		}
		if out != nil {
			b, _ := json.Marshal(struct {
				memcheck.Measurement
				Load string `json:"load_average"`
			}{m, strings.TrimSpace(string(load))})
			fmt.Fprintf(out, "%s\n", b)
		}
		if ctx.Err() != nil {
			break
		}
	}
	os.Exit(status)
}

func anon(n int64) string {
	if n < 0 {
		return "n/a"
	}
	return memcheck.FormatBytes(n)
}

func seconds(d time.Duration) string {
	return strconv.FormatFloat(d.Seconds(), 'f', 1, 64) + " s"
}

func ladderName(d bool) string {
	if d {
		return "default"
	}
	return "short"
}
