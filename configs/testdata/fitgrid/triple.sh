#!/bin/sh
# triple.sh: three wall-clock runs on one corpus, started together so that
# they share the machine (one thread each, three runs on the cores there
# are): the run file 'weft config new --fit' sizes for the budget, the same
# file with the other schedule (a constant rate where it anneals to the
# deadline, annealing where it keeps a constant rate), and the old default
# (the default run file with only the corpus, tokenizer and split set:
# lstm 1x256, embedding 64, a constant rate of 0.002). The reference speed
# given to --fit is timed the way the runs will train: three 'weft bench
# --threads 1' at once, the median taken. Then 'weft eval' scores each best
# checkpoint and the baselines on the test split. The results depend on the
# machine's load, which the output records.
#
# Usage: WEFT=bin/weft CORPORA=.cache/corpora CORPUS=sotu TOKENIZER=word \
#   BUDGET=10m [BASELINES=DIR] sh configs/testdata/fitgrid/triple.sh > sotu10.txt
# CORPUS is sotu (all its .txt files) or moby-dick (data.txt); BASELINES is
# a baselines folder fitted on the same split, to reuse instead of fitting.
set -eu
WEFT=${WEFT:-bin/weft}
CORPORA=${CORPORA:-.cache/corpora}
CORPUS=${CORPUS:-sotu}
TOKENIZER=${TOKENIZER:-word}
BUDGET=${BUDGET:-10m}
WORK=${WORK:-$(mktemp -d)}
mkdir -p "$WORK"
cd "$WORK"
echo "# date $(date -u +%Y-%m-%dT%H:%MZ) corpus $CORPUS tokenizer $TOKENIZER budget $BUDGET cores $(nproc) load $(cut -d' ' -f1-3 /proc/loadavg)"
case $CORPUS in
sotu) corpus=$CORPORA/sotu files="\"$CORPORA/sotu/*.txt\"" ;;
*) corpus=$CORPORA/$CORPUS/data.txt files="\"$corpus\"" ;;
esac
vocab=
[ "$TOKENIZER" = word ] && vocab='max_vocabulary = 10000'

for i in 1 2 3; do
	$WEFT bench --threads 1 --vocab 84 --warmup 3 --windows 30 --json >bench$i.json &
done
wait
speed=$(for i in 1 2 3; do tr ',' '\n' <bench$i.json | sed -n 's/.*"tokens_per_second": *\([0-9]*\).*/\1/p'; done | sort -n | sed -n 2p)
echo "# reference speed, three at once, one thread each: $(for i in 1 2 3; do tr ',' '\n' <bench$i.json | sed -n 's/.*"tokens_per_second": *\([0-9]*\).*/\1/p'; done | paste -s -d' ') tokens/s; median $speed"
if [ "$CORPUS" = sotu ]; then
	$WEFT config new --fit "$BUDGET" --corpus "$CORPORA/sotu/*.txt" --tokenizer "$TOKENIZER" --cores 1 --speed "$speed" >fit.toml 2>fit.err
else
	$WEFT config new --fit "$BUDGET" --corpus "$corpus" --tokenizer "$TOKENIZER" --cores 1 --speed "$speed" >fit.toml 2>fit.err
fi
cat fit.err
sed -e "s/^tokenizer = \"$TOKENIZER\"\$/tokenizer = \"$TOKENIZER\"\nvalidation_fraction = 0.02\ntest_fraction = 0.02/" \
	-e 's/^\[training\]$/[training]\nthreads = 1/' fit.toml >fit-run.toml
if grep -q '^schedule = "constant"' fit-run.toml; then
	other=cosine
	sed -e 's/^schedule = "constant".*$/schedule = "cosine"\nmin_learning_rate = 0.0001/' fit-run.toml >other.toml
else
	other=constant
	sed -e 's/^schedule = "cosine".*$/schedule = "constant"/' -e '/^min_learning_rate/d' fit-run.toml >other.toml
fi
cat >default.toml <<TOML
[data]
files = [$files]
tokenizer = "$TOKENIZER"
$vocab
validation_fraction = 0.02
test_fraction = 0.02
[training]
threads = 1
[evaluation]
every_steps = 1000
[checkpoint]
every_steps = 1000
keep_last = 3
TOML
echo "## fitted run file"
cat fit-run.toml
echo "## difference of the $other one"
diff fit-run.toml other.toml || true
echo "## old default"
cat default.toml
$WEFT train fit-run.toml --run r-fit --for "$BUDGET" >fit.out 2>fit.log &
$WEFT train other.toml --run r-other --for "$BUDGET" >other.out 2>other.log &
$WEFT train default.toml --run r-default --for "$BUDGET" >default.out 2>default.log &
wait
echo "# trained; load $(cut -d' ' -f1-3 /proc/loadavg)"
for n in fit other default; do
	echo "## $n"
	grep 'deadline plan\|behind the deadline\|out of proportion' $n.log || true
	cat $n.out
done
if [ -n "${BASELINES:-}" ]; then
	cp -r "$BASELINES" r-default/baselines
fi
$WEFT eval --run r-default >eval-default.txt 2>&1
for n in fit other; do
	cp -r r-default/baselines r-$n/ # the same split: the cached ladder is valid (its manifest is checked)
	$WEFT eval --run r-$n >eval-$n.txt 2>&1
done
for n in fit other default; do
	echo "## eval $n"
	cat eval-$n.txt
done
echo "# end $(date -u +%Y-%m-%dT%H:%MZ) load $(cut -d' ' -f1-3 /proc/loadavg)"
