#!/bin/sh
# Issue 18's table: for each corpus size, the peak memory and the time of
# weft prepare, weft train (STEPS steps of a tiny LSTM), weft baselines and
# weft eval, each run as a child process on a run directory over a
# generated corpus (data/corpustest.Generate, seed 1). Peak memory is
# getrusage's maximum resident set (which counts the file-backed pages of a
# memory-mapped token cache) and, on Linux, the peak of RssAnon sampled
# from /proc/PID/status every 20 ms (anonymous memory only). The table is
# printed as Markdown; each corpus and its run directory are deleted as soon
# as their row is done (also when interrupted).
#
# Usage, from anywhere in the repository:
#
#	testdata/memory-table.sh [SIZE...]     (default: 40MB 400MB; decimal units, e.g. 4GB)
#
# Environment: WEFT (the weft binary to measure; default: build bin/weft
# with make build), TMPDIR (where the corpora go: a size of corpus needs
# about 3 times its size of disk, for the corpus and a token cache of 2
# bytes a character), STEPS (training steps, default 20), LADDER (default:
# fit the default baseline ladder, 8-grams with five smoothers and a
# 32-state HMM, instead of the short ladder of cmd/internal/memcheck.RunFile),
# KILL (kill a verb whose resident set passes this size, e.g. 16GB, to
# spare a shared machine; default no limit), JSON (also append one JSON
# object a line per size to this file).
set -eu

cd "$(dirname "$0")/.."
[ $# -gt 0 ] || set -- 40MB 400MB
if [ -z "${WEFT:-}" ]; then
	make -s build
	WEFT=bin/weft
fi
if [ ! -x "$WEFT" ]; then
	echo "memory-table: $WEFT is not an executable weft" >&2
	exit 1
fi
go build -o bin/memtable ./cmd/internal/memcheck/memtable
set -- -weft "$WEFT" -steps "${STEPS:-20}" -kill "${KILL:-0}" "$@"
if [ "${LADDER:-}" = default ]; then
	set -- -default-ladder "$@"
fi
if [ -n "${JSON:-}" ]; then
	set -- -json "$JSON" "$@"
fi
if [ -n "${TMPDIR:-}" ]; then
	set -- -tmp "$TMPDIR" "$@"
fi
exec bin/memtable "$@"
