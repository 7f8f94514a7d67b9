#!/bin/sh
# night.sh: three wall-clock runs side by side on Moby-Dick (char), started
# together so that they share the machine's load: the run file 'weft config
# new --fit' sizes for the budget, the old default (lstm 1x256) at a
# constant rate, and the old default with cosine annealing to the deadline.
# Then 'weft eval' scores each best checkpoint and the baselines on the test
# split. Unlike grid.sh, the results depend on the machine's load, which
# the output records.
#
# Usage: WEFT=bin/weft CORPORA=.cache/corpora BUDGET=10m sh configs/testdata/fitgrid/night.sh > night.txt
set -eu
WEFT=${WEFT:-bin/weft}
CORPORA=${CORPORA:-.cache/corpora}
BUDGET=${BUDGET:-10m}
WORK=${WORK:-$(mktemp -d)}
mkdir -p "$WORK"
cd "$WORK"
echo "# date $(date -u +%Y-%m-%dT%H:%MZ) budget $BUDGET cores $(nproc) load $(cut -d' ' -f1-3 /proc/loadavg)"
corpus=$CORPORA/moby-dick/data.txt
$WEFT config new --fit "$BUDGET" --corpus "$corpus" --cores 2 >fit.toml 2>fit.err
cat fit.err
# The fitted file with the split and threads of the other two.
sed -e 's/^tokenizer = "char"$/tokenizer = "char"\nvalidation_fraction = 0.02\ntest_fraction = 0.02/' \
	-e 's/^\[training\]$/[training]\nthreads = 2/' -e '0,/^every_steps = 1000$/s//every_steps = 500/' fit.toml >fit-night.toml
for sched in constant cosine; do
	floor=
	[ $sched = cosine ] && floor='min_learning_rate = 0.0001'
	cat >default-$sched.toml <<TOML
[data]
files = ["$corpus"]
tokenizer = "char"
validation_fraction = 0.02
test_fraction = 0.02
[model]
cell = "lstm"
layers = 1
hidden_size = 256
embedding_size = 64
[training]
threads = 2
schedule = "$sched"
$floor
[evaluation]
every_steps = 500
[checkpoint]
every_steps = 0
TOML
done
$WEFT train fit-night.toml --run r-fit --for "$BUDGET" >fit.out 2>fit.log &
$WEFT train default-constant.toml --run r-default-constant --for "$BUDGET" >default-constant.out 2>default-constant.log &
$WEFT train default-cosine.toml --run r-default-cosine --for "$BUDGET" >default-cosine.out 2>default-cosine.log &
wait
echo "# trained; load $(cut -d' ' -f1-3 /proc/loadavg)"
for n in fit default-constant default-cosine; do
	echo "## $n"
	grep 'deadline plan' $n.log || true
	cat $n.out
done
$WEFT eval --run r-default-constant >eval-default-constant.txt 2>&1
for n in fit default-cosine; do
	cp -r r-default-constant/baselines r-$n/ # the same split: the cached ladder is valid (its manifest is checked)
	$WEFT eval --run r-$n >eval-$n.txt 2>&1
done
for n in default-constant fit default-cosine; do
	echo "## eval $n"
	cat eval-$n.txt
done
echo "# end $(date -u +%Y-%m-%dT%H:%MZ) load $(cut -d' ' -f1-3 /proc/loadavg)"
