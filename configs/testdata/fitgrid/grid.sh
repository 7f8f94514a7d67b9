#!/bin/sh
# grid.sh: the measurements behind the sizing rule (configs/fit.go) and the
# README section "Choosing a model for the night". It trains a small grid of
# models on the real corpora the tests fetch (testdata/fetch-corpora.sh) for
# a fixed number of training TOKENS each, so that the results do not depend
# on the load of the shared machine, and prints one tab-separated line per
# run: corpus, model, schedule, token budget, steps, parameters, best
# validation bits per character, wall seconds and tokens per second (the
# last two DO depend on the load). The baselines line gives the best
# baseline of the ladder on the same validation split.
#
# Usage: WEFT=bin/weft CORPORA=.cache/corpora sh configs/testdata/fitgrid/grid.sh > table.tsv
set -eu
WEFT=${WEFT:-bin/weft}
CORPORA=${CORPORA:-.cache/corpora}
WORK=${WORK:-$(mktemp -d)}
mkdir -p "$WORK"
echo "# date $(date -u +%Y-%m-%dT%H:%MZ) commit $(git rev-parse --short HEAD 2>/dev/null || echo unknown) cores $(nproc) load $(cut -d' ' -f1-3 /proc/loadavg)"
printf 'corpus\tmodel\tschedule\ttokens\tsteps\tparams\tval_bpc\twall_s\ttokens_per_s\n'

# run CORPUS NAME LAYERS HIDDEN EMB DROPOUT SCHEDULE TOKENS BATCH UNROLL DATA...
run() {
	corpus=$1 name=$2 layers=$3 hidden=$4 emb=$5 dropout=$6 sched=$7 tokens=$8 batch=$9 unroll=${10}
	shift 10
	steps=$((tokens / (batch * unroll)))
	dir=$WORK/$corpus-$name-$sched-$tokens
	cat >"$WORK/run.toml" <<TOML
[data]
$*
validation_fraction = 0.02
test_fraction = 0.02
[model]
cell = "lstm"
layers = $layers
hidden_size = $hidden
embedding_size = $emb
dropout = $dropout
[training]
batch_size = $batch
unroll_steps = $unroll
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
	params=$(printf '%s\n' "$log" | sed -n 's/^training [^,]*, \([0-9,]*\) parameters.*/\1/p' | tr -d ,)
	awk -v c="$corpus" -v n="$name" -v s="$sched" -v t="$tokens" -v st="$steps" -v p="$params" -v b="$bpc" -v a="$start" -v e="$end" \
		'BEGIN { w = e - a; printf "%s\t%s\t%s\t%d\t%d\t%s\t%s\t%.0f\t%.0f\n", c, n, s, t, st, p, b, w, t / w }'
}

moby="files = [\"$CORPORA/moby-dick/data.txt\"]
tokenizer = \"char\""
sotu="files = [\"$CORPORA/sotu\"]
include = [\"*.txt\"]
tokenizer = \"word\"
max_vocabulary = 10000"

for tokens in 1000000 3000000; do
	run moby lstm-1x256 1 256 64 0 constant $tokens 32 64 "$moby"
	run moby lstm-1x256 1 256 64 0 cosine $tokens 32 64 "$moby"
	run moby lstm-1x128 1 128 64 0 cosine $tokens 32 64 "$moby"
	run moby lstm-1x512 1 512 64 0 cosine $tokens 32 64 "$moby"
	run moby lstm-2x256-d0.1 2 256 64 0.1 cosine $tokens 32 64 "$moby"
done
$WEFT baselines --run "$WORK/moby-lstm-1x256-constant-1000000" 2>&1 | sed 's/^/# moby baselines: /'
for tokens in 300000; do
	run sotu lstm-1x256 1 256 128 0 constant $tokens 32 35 "$sotu"
	run sotu lstm-1x256 1 256 128 0 cosine $tokens 32 35 "$sotu"
	run sotu lstm-1x128 1 128 128 0 cosine $tokens 32 35 "$sotu"
done
$WEFT baselines --run "$WORK/sotu-lstm-1x256-constant-300000" 2>&1 | sed 's/^/# sotu baselines: /'
echo "# end $(date -u +%Y-%m-%dT%H:%MZ) load $(cut -d' ' -f1-3 /proc/loadavg)"
