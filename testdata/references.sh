#!/usr/bin/env bash
# Regenerates the reference outputs the tests embed, from general-purpose
# reference libraries: Debian's python3-torch (recurrent cells, softmax
# cross-entropy, chi-square critical values) and python3-nltk (n-gram
# smoothers), and an independent json+struct safetensors writer and reader.
# The tests never run Python; they read the committed outputs. After running
# this, `git diff` shows whether a reference value moved.
set -euo pipefail
root=$(cd "$(dirname "$0")/.." && pwd)
py=/usr/bin/python3
missing=()
"$py" -c 'import torch' 2>/dev/null || missing+=(python3-torch)
"$py" -c 'import nltk' 2>/dev/null || missing+=(python3-nltk)
if [ ${#missing[@]} -gt 0 ]; then
	if [ "$(id -u)" = 0 ]; then
		DEBIAN_FRONTEND=noninteractive apt-get update -q
		DEBIAN_FRONTEND=noninteractive apt-get install -y -q "${missing[@]}"
	else
		echo "references: missing Debian packages: ${missing[*]} (install them with: sudo apt-get install ${missing[*]})" >&2
		exit 1
	fi
fi
cd "$root/rnn/testdata" && "$py" torch_reference.py && "$py" torch_class_reference.py && "$py" chi2_critical.py > chi2_critical.json
cd "$root/rnn/linalg/testdata" && "$py" softmax_ce.py > softmax_ce.out
cd "$root" && "$py" eval/testdata/nltk_reference.py > eval/testdata/nltk_reference.json
cd "$root" && "$py" eval/testdata/hmm_reference.py > eval/testdata/hmm_reference.json
cd "$root/checkpoint/testdata/interop" && "$py" write_reference.py && "$py" read_weft.py
echo "references regenerated; see git diff"
