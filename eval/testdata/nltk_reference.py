#!/usr/bin/python3
"""Reference n-gram probabilities from NLTK's nltk.lm for weft's eval tests.

Run with Debian's python3-nltk 3.8 (offline, no data download):

    /usr/bin/python3 eval/testdata/nltk_reference.py > eval/testdata/nltk_reference.json

The corpus is invented. NLTK's conventions, which the Go test reproduces:
every sentence is padded with order-1 "<s>" and order-1 "</s>" symbols;
the counts are the everygrams (all n-grams of orders 1..order) of the
padded sentences, so the padding symbols are counted as tokens too; one
discount serves every order; the unigram level has no uniform floor
(Kneser-Ney: continuation probability; Witten-Bell and absolute
discounting: relative frequency); Lidstone's vocabulary size counts the
padding symbols and "<UNK>".
"""
import json
import sys

import nltk
from nltk.lm import (AbsoluteDiscountingInterpolated, KneserNeyInterpolated,
                     Lidstone, WittenBellInterpolated)
from nltk.lm.preprocessing import padded_everygram_pipeline

ORDER = 3
SENTS = [
    "the cat sat on the mat".split(),
    "the dog sat on the log".split(),
    "a cat and a dog met on the mat".split(),
    "the cat saw the dog".split(),
    "on the log sat a cat".split(),
    "a dog saw a cat on the log".split(),
]
MODELS = {
    "kneser_ney": lambda: KneserNeyInterpolated(ORDER, discount=0.1),
    "witten_bell": lambda: WittenBellInterpolated(ORDER),
    "absolute": lambda: AbsoluteDiscountingInterpolated(ORDER, discount=0.75),
    "lidstone": lambda: Lidstone(0.5, ORDER),
}
CONTEXTS = [
    ("<s>", "<s>"),
    ("<s>", "the"),
    ("the", "cat"),
    ("sat", "on"),
    ("on", "the"),
    ("a", "dog"),
    ("dog", "cat"),  # never seen as a bigram: backs off
    ("mat", "</s>"),
    ("cat", "met"),  # "cat met" unseen, "met" seen
]


def main():
    out = {"nltk_version": nltk.__version__, "order": ORDER,
           "sentences": [" ".join(s) for s in SENTS], "models": {}}
    vocab = None
    for name, make in MODELS.items():
        train, padded = padded_everygram_pipeline(ORDER, SENTS)
        lm = make()
        lm.fit(train, padded)
        if vocab is None:
            vocab = sorted(lm.vocab)
            out["vocab"] = vocab
        rows = []
        for ctx in CONTEXTS:
            for w in vocab:
                if w == "<UNK>":
                    continue
                try:
                    p = lm.score(w, list(ctx))
                except ZeroDivisionError:
                    continue
                rows.append({"context": list(ctx), "word": w, "p": p})
        out["models"][name] = rows
    json.dump(out, sys.stdout, indent=1, sort_keys=True)
    sys.stdout.write("\n")


if __name__ == "__main__":
    main()
