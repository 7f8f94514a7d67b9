#!/bin/sh
# make bench-peer: weft against PyTorch on the same models, shapes, dtype
# (float32), optimizer (Adam, clipping at norm 5) and number of windows,
# trained by truncated BPTT on synthetic tokens, runs alternating
# (weft, PyTorch, weft, PyTorch, ...) in one invocation, at every thread
# count of THREADS. Prints a Markdown table of medians, each engine's
# scaling over its smallest thread count and the ratios, and writes it,
# with every run, as JSON.
#
# Configurations (issue 7): (a) the reference LSTM V=96 E=64 H=256 B=32
# T=64; (b) a 2-layer LSTM V=96 E=128 H=512 B=32 T=100; (c) a GRU word
# model V=10000 E=H=256 B=32 T=35. weft at each count of THREADS
# (--threads); PyTorch at torch.set_num_threads of the same counts, the
# fastest of them being its "best".
#
# PyTorch runs with OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE unset in its own
# command only (they force OpenBLAS onto a slower kernel on our machines).
#
# Environment: THREADS (thread counts, default "1 2" up to 2 cores, else
# 1 2 4 ... up to the core count and the core count itself), REPS (runs per
# engine, thread count and configuration, default 3), CONFIGS (which of
# "a b c", default all), WEFT (default bin/weft), OLD (a second weft
# binary, run right after WEFT in every round as engine "weft-old": an
# older build to compare against), PEER ("torch", the default, or "none"
# to leave PyTorch out), OUT (default .cache/bench-peer).
set -eu

cd "$(dirname "$0")/.."
REPS=${REPS:-3}
WEFT=${WEFT:-bin/weft}
OLD=${OLD:-}
PEER=${PEER:-torch}
CONFIGS=${CONFIGS:-a b c}
OUT=${OUT:-.cache/bench-peer}
PY=/usr/bin/python3
TORCH=testdata/bench_peer_torch.py

cores=$(nproc 2>/dev/null || getconf _NPROCESSORS_ONLN 2>/dev/null || echo 2)
if [ -z "${THREADS:-}" ]; then
	THREADS=1
	n=2
	while [ "$n" -le "$cores" ]; do
		THREADS="$THREADS $n"
		n=$((n * 2))
	done
	[ "$((n / 2))" -eq "$cores" ] || [ "$cores" -lt 2 ] || THREADS="$THREADS $cores"
fi
for th in $THREADS; do
	case $th in
	'' | *[!0-9]* | 0) echo "bench-peer: THREADS must list counts of 1 or more, got '$THREADS'" >&2; exit 2 ;;
	esac
done

if [ "$PEER" = torch ] && ! "$PY" -c 'import torch' 2>/dev/null; then
	if [ "$(id -u)" = 0 ] && command -v apt-get >/dev/null 2>&1; then
		echo "bench-peer: installing python3-torch with apt-get" >&2
		apt-get install -y python3-torch >&2
	else
		echo "bench-peer: PyTorch is missing for $PY; install it with: sudo apt-get install -y python3-torch" >&2
		exit 1
	fi
fi
for bin in "$WEFT" $OLD; do
	if [ ! -x "$bin" ]; then
		echo "bench-peer: $bin not found; run 'make build' (make bench-peer builds bin/weft)" >&2
		exit 1
	fi
done

mkdir -p "$OUT"
runs="$OUT/runs.jsonl"
: >"$runs"

# tag ENGINE CONFIG THREADS: add the labels to the JSON object on stdin and
# append it as one line to the runs file.
tag() {
	"$PY" -c 'import json, sys
try:
    d = json.load(sys.stdin)
except ValueError:
    sys.exit("bench-peer: the %s run of %s at %s thread(s) printed no result" % tuple(sys.argv[1:4]))
d.update(engine=sys.argv[1], config=sys.argv[2], requested_threads=int(sys.argv[3]))
print(json.dumps(d))' "$1" "$2" "$3" >>"$runs"
}

# weftrun BINARY ENGINE NAME CELL LAYERS VOCAB EMBEDDING HIDDEN BATCH UNROLL WINDOWS THREADS
weftrun() {
	"$1" bench --json --vocab "$6" --windows "${11}" --warmup 2 --threads "${12}" \
		--set model.cell="$4" --set model.layers="$5" --set model.embedding_size="$7" \
		--set model.hidden_size="$8" --set model.dropout=0 --set training.batch_size="$9" \
		--set training.unroll_steps="${10}" --set training.optimizer=adam \
		--set training.learning_rate=0.002 --set training.clip_norm=5 |
		tag "$2" "$3" "${12}"
}

# bench NAME CELL LAYERS VOCAB EMBEDDING HIDDEN BATCH UNROLL WINDOWS
bench() {
	name=$1 cell=$2 layers=$3 vocab=$4 emb=$5 hid=$6 batch=$7 unroll=$8 windows=$9
	echo "bench-peer: $name: $cell ${layers}x$hid, V=$vocab E=$emb B=$batch T=$unroll, $windows windows, threads $THREADS, $REPS runs each" >&2
	i=0
	while [ "$i" -lt "$REPS" ]; do
		for th in $THREADS; do
			weftrun "$WEFT" weft "$@" "$th"
			if [ -n "$OLD" ]; then
				weftrun "$OLD" weft-old "$@" "$th"
			fi
			if [ "$PEER" = torch ]; then
				env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE OMP_NUM_THREADS="$th" OPENBLAS_NUM_THREADS="$th" MKL_NUM_THREADS="$th" \
					"$PY" "$TORCH" train --cell "$cell" --layers "$layers" --vocab "$vocab" --embedding "$emb" \
					--hidden "$hid" --batch "$batch" --unroll "$unroll" --windows "$windows" --warmup 2 \
					--threads "$th" --optimizer adam --lr 0.002 --clip 5 |
					tag torch "$name" "$th"
			fi
		done
		i=$((i + 1))
	done
}

echo "bench-peer: $(date -u '+%Y-%m-%d %H:%M UTC'), $cores cores, load average $(cut -d' ' -f1-3 /proc/loadavg 2>/dev/null || uptime)" >&2
for c in $CONFIGS; do
	case $c in
	a) bench "(a) lstm 1x256" lstm 1 96 64 256 32 64 20 ;;
	b) bench "(b) lstm 2x512" lstm 2 96 128 512 32 100 10 ;;
	c) bench "(c) gru word" gru 1 10000 256 256 32 35 10 ;;
	*) echo "bench-peer: CONFIGS lists a, b and c, got '$c'" >&2; exit 2 ;;
	esac
done
echo "bench-peer: load average at the end $(cut -d' ' -f1-3 /proc/loadavg 2>/dev/null || uptime)" >&2

"$PY" "$TORCH" summarize "$runs" "$OUT/summary.json" | tee "$OUT/summary.md"
echo "bench-peer: every run in $runs, the summary in $OUT/summary.json and $OUT/summary.md" >&2
