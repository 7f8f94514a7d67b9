#!/bin/sh
# The thread sweep of issue 17 on a many-core machine, for a machine that has
# a prebuilt weft and a python3 with PyTorch but no Go and no network: the
# models (a), (b), (c) of `make bench-peer` (testdata/bench-peer.sh, same
# flags, same protocol), weft and PyTorch alternating at each thread count,
# every run under a timeout, the whole under a time budget. Each result is
# appended to "$OUT/manycore.jsonl" as soon as it exists (one JSON object a
# line: the first describes the machine and the peer), so a run cut short
# keeps what it measured; at the end the summary of bench_peer_torch.py goes
# to "$OUT/summary.md" and "$OUT/summary.json".
#
# Usage, from the repository root (bin/weft built beforehand with
# `make build`; GOOS/GOARCH of the target machine):
#
#	OUT=/some/dir testdata/bench-manycore.sh
#
# Environment: OUT (required: a directory), WEFT (default bin/weft), OLD (a
# second weft binary run right after WEFT at every point as engine
# "weft-old", e.g. a build of an older commit; default none), PY (a python3
# with torch; default the first of python3 and /usr/bin/python3 that imports
# it), THREADS (default 1 2 4 ... up to the core count, with 3/4 of it and
# the count itself), REPS (rounds, default 3), CONFIGS (default "a b c"),
# BUDGET (seconds for the whole sweep, default 540: no run starts after it,
# and each run's timeout is cut to what is left), RUN_TIMEOUT (seconds per
# run, default 120).
set -u

cd "$(dirname "$0")/.."
: "${OUT:?OUT must name a directory for the results}"
WEFT=${WEFT:-bin/weft}
OLD=${OLD:-}
REPS=${REPS:-3}
CONFIGS=${CONFIGS:-a b c}
BUDGET=${BUDGET:-540}
RUN_TIMEOUT=${RUN_TIMEOUT:-120}
TORCH=testdata/bench_peer_torch.py
mkdir -p "$OUT"
log="$OUT/manycore.jsonl"
start=$(date +%s)

if [ -z "${PY:-}" ]; then
	for p in python3 /usr/bin/python3; do
		if "$p" -c 'import torch' 2>/dev/null; then
			PY=$p
			break
		fi
	done
fi
if [ -z "${PY:-}" ]; then
	echo "bench-manycore: no python3 with torch found; set PY" >&2
	exit 1
fi
for bin in "$WEFT" $OLD; do
	if [ ! -x "$bin" ]; then
		echo "bench-manycore: $bin is not an executable weft" >&2
		exit 1
	fi
done

cores=$(nproc 2>/dev/null || getconf _NPROCESSORS_ONLN)
if [ -z "${THREADS:-}" ]; then
	THREADS=$("$PY" -c 'import sys
c = int(sys.argv[1])
s = {c}
n = 1
while n <= c:
    s.add(n)
    n *= 2
if c >= 12:
    s.add(c * 3 // 4)
print(" ".join(str(x) for x in sorted(s)))' "$cores")
fi

# The machine and the peer, as the first line.
"$PY" - "$cores" "$WEFT" >>"$log" <<'EOF'
import json, os, platform, subprocess, sys
import torch
sys.path.insert(0, "testdata")
from bench_peer_torch import torch_build
cpu = ""
try:
    for line in open("/proc/cpuinfo"):
        if line.startswith("model name"):
            cpu = line.split(":", 1)[1].strip()
            break
except OSError:
    pass
ver = subprocess.run([sys.argv[2], "--version"], capture_output=True, text=True).stdout.strip()
print(json.dumps({"kind": "machine", "cores": int(sys.argv[1]), "cpu": cpu, "machine": platform.machine(),
                  "kernel": platform.release(), "python": platform.python_version(),
                  "torch_version": torch.__version__, "torch_build": torch_build(torch),
                  "torch_parallel_info": torch.__config__.parallel_info(), "weft_version": ver,
                  "load_average": os.getloadavg()}))
EOF
echo "bench-manycore: $cores cores, threads $THREADS, $REPS rounds, budget ${BUDGET}s, results in $log" >&2

# left: seconds of the budget left.
left() { echo $((BUDGET - ($(date +%s) - start))); }

# record ENGINE CONFIG THREADS: tag the JSON object on stdin and append it.
record() {
	"$PY" -c 'import json, sys
try:
    d = json.load(sys.stdin)
except ValueError:
    d = {"error": "no result (timed out or failed)"}
d.update(engine=sys.argv[1], config=sys.argv[2], requested_threads=int(sys.argv[3]))
print(json.dumps(d))' "$1" "$2" "$3" >>"$log"
}

# limit: the timeout of the next run, or nothing when the budget is spent.
limit() {
	l=$(left)
	[ "$l" -gt 10 ] || return 1
	[ "$l" -lt "$RUN_TIMEOUT" ] || l=$RUN_TIMEOUT
	echo "$l"
}

# weftrun BINARY ENGINE NAME CELL LAYERS VOCAB EMBEDDING HIDDEN BATCH UNROLL WINDOWS THREADS
weftrun() {
	t=$(limit) || return 1
	timeout -k 5 "$t" "$1" bench --json --vocab "$6" --windows "${11}" --warmup 2 --threads "${12}" \
		--set model.cell="$4" --set model.layers="$5" --set model.embedding_size="$7" \
		--set model.hidden_size="$8" --set model.dropout=0 --set training.batch_size="$9" \
		--set training.unroll_steps="${10}" --set training.optimizer=adam \
		--set training.learning_rate=0.002 --set training.clip_norm=5 | record "$2" "$3" "${12}"
}

# torchrun NAME CELL LAYERS VOCAB EMBEDDING HIDDEN BATCH UNROLL WINDOWS THREADS
torchrun() {
	t=$(limit) || return 1
	env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE OMP_NUM_THREADS="${10}" MKL_NUM_THREADS="${10}" OPENBLAS_NUM_THREADS="${10}" \
		timeout -k 5 "$t" "$PY" "$TORCH" train --cell "$2" --layers "$3" --vocab "$4" --embedding "$5" \
		--hidden "$6" --batch "$7" --unroll "$8" --windows "$9" --warmup 2 --threads "${10}" \
		--optimizer adam --lr 0.002 --clip 5 | record torch "$1" "${10}"
}

# point CONFIG THREADS: one run of each engine.
point() {
	case $1 in
	a) set -- "(a) lstm 1x256" lstm 1 96 64 256 32 64 20 "$2" ;;
	b) set -- "(b) lstm 2x512" lstm 2 96 128 512 32 100 6 "$2" ;;
	c) set -- "(c) gru word" gru 1 10000 256 256 32 35 10 "$2" ;;
	*) echo "bench-manycore: CONFIGS lists a, b and c, got '$1'" >&2; exit 2 ;;
	esac
	weftrun "$WEFT" weft "$@" || return 1
	if [ -n "$OLD" ]; then
		weftrun "$OLD" weft-old "$@" || return 1
	fi
	torchrun "$@" || return 1
}

r=1
while [ "$r" -le "$REPS" ]; do
	for c in $CONFIGS; do
		for th in $THREADS; do
			if ! point "$c" "$th"; then
				echo "bench-manycore: budget of ${BUDGET}s spent in round $r; stopping" >&2
				break 3
			fi
		done
	done
	echo "bench-manycore: round $r done after $(($(date +%s) - start))s" >&2
	r=$((r + 1))
done

"$PY" "$TORCH" summarize "$log" "$OUT/summary.json" >"$OUT/summary.md" 2>&1
cat "$OUT/summary.md"
echo "bench-manycore: $(($(date +%s) - start))s in all; every run in $log" >&2
