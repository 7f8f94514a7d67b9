#!/bin/sh
# anneal.sh: the same fitted run file twice on Moby-Dick (char), started
# together so that they share the machine, one thread each: once as
# 'weft config new --fit' writes it (cosine annealing to the deadline) and
# once with a constant rate, everything else equal. Then 'weft eval' scores
# each best checkpoint and the baselines on the test split. It answers
# whether annealing to the deadline beats a constant rate at the same
# wall-clock budget for the same model; the results depend on the
# machine's load, which the output records.
#
# Usage: WEFT=bin/weft CORPORA=.cache/corpora BUDGET=30m sh configs/testdata/fitgrid/anneal.sh > anneal30.txt
set -eu
WEFT=${WEFT:-bin/weft}
CORPORA=${CORPORA:-.cache/corpora}
BUDGET=${BUDGET:-30m}
WORK=${WORK:-$(mktemp -d)}
mkdir -p "$WORK"
cd "$WORK"
echo "# date $(date -u +%Y-%m-%dT%H:%MZ) budget $BUDGET cores $(nproc) load $(cut -d' ' -f1-3 /proc/loadavg) weft $($WEFT --version 2>/dev/null || true)"
corpus=$CORPORA/moby-dick/data.txt
$WEFT config new --fit "$BUDGET" --corpus "$corpus" --cores 1 >fit.toml 2>fit.err
cat fit.err
# The split of the other measurements, one thread each.
sed -e 's/^tokenizer = "char"$/tokenizer = "char"\nvalidation_fraction = 0.02\ntest_fraction = 0.02/' \
	-e 's/^\[training\]$/[training]\nthreads = 1/' fit.toml >anneal.toml
grep -q '^schedule = "cosine"' anneal.toml || { echo "# the fitted file does not anneal:"; grep '^schedule' anneal.toml; exit 1; }
sed -e 's/^schedule = "cosine".*$/schedule = "constant"/' anneal.toml >constant.toml
echo "## run file (annealing)"
cat anneal.toml
echo "## difference of the constant one"
diff anneal.toml constant.toml || true
$WEFT train anneal.toml --run r-anneal --for "$BUDGET" >anneal.out 2>anneal.log &
$WEFT train constant.toml --run r-constant --for "$BUDGET" >constant.out 2>constant.log &
wait
echo "# trained; load $(cut -d' ' -f1-3 /proc/loadavg)"
for n in anneal constant; do
	echo "## $n"
	grep 'deadline plan\|planned' $n.log | tail -3 || true
	cat $n.out
done
$WEFT eval --run r-constant >eval-constant.txt 2>&1
cp -r r-constant/baselines r-anneal/ # the same split: the cached ladder is valid (its manifest is checked)
$WEFT eval --run r-anneal >eval-anneal.txt 2>&1
for n in anneal constant; do
	echo "## eval $n"
	cat eval-$n.txt
done
echo "# end $(date -u +%Y-%m-%dT%H:%MZ) load $(cut -d' ' -f1-3 /proc/loadavg)"
