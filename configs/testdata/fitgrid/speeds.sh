#!/bin/sh
# speeds.sh: the training speed of the ladder's models on this machine,
# measured with 'weft bench' (synthetic tokens, full training steps) at one
# and at two threads, three times each, and the median printed. The sizing
# rule's speed model (configs/fit.go: costShare, refTokensPerCore) is fitted
# to the one-thread medians. Run it on an otherwise idle machine: the load
# is printed before and after.
#
# Usage: WEFT=bin/weft sh configs/testdata/fitgrid/speeds.sh > speeds.tsv
set -eu
WEFT=${WEFT:-bin/weft}
echo "# date $(date -u +%Y-%m-%dT%H:%MZ) commit $(git rev-parse --short HEAD 2>/dev/null || echo unknown) cores $(nproc) load $(cut -d' ' -f1-3 /proc/loadavg)"
printf 'vocab\tembedding\tunroll\tmodel\tthreads\tparams\ttokens_per_s\n'
# speed VOCAB EMB UNROLL LAYERS HIDDEN THREADS
speed() {
	for i in 1 2 3; do
		$WEFT bench --threads "$6" --vocab "$1" --windows 30 --warmup 3 \
			--set model.embedding_size="$2" --set training.unroll_steps="$3" \
			--set model.layers="$4" --set model.hidden_size="$5" --json |
			tr ',' '\n' | sed -n 's/.*"\(parameters\|tokens_per_second\)": *\([0-9.]*\).*/\2/p' | paste -s -
	done | sort -t '	' -k2 -n | sed -n 2p | {
		read -r params tps
		printf '%s\t%s\t%s\tlstm-%sx%s\t%s\t%s\t%.0f\n' "$1" "$2" "$3" "$4" "$5" "$6" "$params" "$tps"
	}
}
for threads in 1 2; do
	for m in "1 128" "1 256" "1 384" "1 512" "2 512"; do
		speed 84 64 64 $m $threads
	done
	# words: the vocabulary of max_vocabulary = 10000, the word unroll
	for m in "1 128" "1 256" "1 512"; do
		speed 10000 128 35 $m $threads
	done
done
echo "# end $(date -u +%Y-%m-%dT%H:%MZ) load $(cut -d' ' -f1-3 /proc/loadavg)"
