#!/bin/sh
# schedules.sh: constant rate against annealing (cosine, linear) at a fixed
# number of training TOKENS, for the default model (lstm 1x256) on
# Moby-Dick, at two peak learning rates. Same output columns as grid.sh,
# with the peak rate added. The annealing schedules decay to 0.0001 at the
# token budget (max_steps), as a run annealing to its deadline does at its
# planned step.
#
# Usage: WEFT=bin/weft CORPORA=.cache/corpora sh configs/testdata/fitgrid/schedules.sh > schedules.tsv
set -eu
WEFT=${WEFT:-bin/weft}
CORPORA=${CORPORA:-.cache/corpora}
WORK=${WORK:-$(mktemp -d)}
mkdir -p "$WORK"
echo "# date $(date -u +%Y-%m-%dT%H:%MZ) commit $(git rev-parse --short HEAD 2>/dev/null || echo unknown) cores $(nproc) load $(cut -d' ' -f1-3 /proc/loadavg)"
printf 'corpus\tmodel\tschedule\tlearning_rate\ttokens\tsteps\tval_bpc\twall_s\ttokens_per_s\n'

# run SCHEDULE RATE TOKENS
run() {
	sched=$1 lr=$2 tokens=$3
	steps=$((tokens / (32 * 64)))
	dir=$WORK/moby-$sched-$lr-$tokens
	cat >"$WORK/run.toml" <<TOML
[data]
files = ["$CORPORA/moby-dick/data.txt"]
tokenizer = "char"
validation_fraction = 0.02
test_fraction = 0.02
[model]
cell = "lstm"
layers = 1
hidden_size = 256
embedding_size = 64
[training]
learning_rate = $lr
max_steps = $steps
schedule = "$sched"
min_learning_rate = 0.0001
threads = 2
[evaluation]
every_steps = 0
[checkpoint]
every_steps = 0
TOML
	start=$(date +%s.%N)
	log=$($WEFT train "$WORK/run.toml" --run "$dir" 2>&1)
	end=$(date +%s.%N)
	bpc=$(printf '%s\n' "$log" | sed -n 's/.*Best validation: \([0-9.]*\) bits.*/\1/p')
	awk -v s="$sched" -v l="$lr" -v t="$tokens" -v st="$steps" -v b="$bpc" -v a="$start" -v e="$end" \
		'BEGIN { w = e - a; printf "moby\tlstm-1x256\t%s\t%s\t%d\t%d\t%s\t%.0f\t%.0f\n", s, l, t, st, b, w, t / w }'
}

for lr in 0.004 0.008; do
	for sched in constant cosine linear; do
		run $sched $lr 3000000
	done
done
run linear 0.002 3000000
echo "# end $(date -u +%Y-%m-%dT%H:%MZ) load $(cut -d' ' -f1-3 /proc/loadavg)"
