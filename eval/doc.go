// Package eval scores language models on held-out text: cross-entropy,
// perplexity and bits per character with bootstrap intervals, and the
// classical baselines (n-gram smoothers, Markov chains and hidden Markov
// models) that recurrent models are compared against.
//
// # Models and units
//
// Every model satisfies LanguageModel: LogProbs writes the natural
// logarithm of P(token | history) for each token, so scores are in nats
// until a Result converts them. For a held-out split of T tokens spanning
// C characters:
//
//	cross_entropy_nats = -Σ_t ln P(x_t | x_<t)        (a total, not a mean)
//	cross_entropy_bits = cross_entropy_nats / ln 2
//	bits_per_token     = cross_entropy_bits / T
//	perplexity         = 2^bits_per_token              (per token)
//	bits_per_char      = cross_entropy_bits / C
//
// Bits per character divides by the characters of the text whatever the
// tokenization, so character, word and sub-word models share one scale,
// provided each model's probabilities cover the whole text: a model whose
// unknown symbol stands for many strings does not (whatever the
// tokenizer), nor does one of lower-cased text, and Compare marks such
// rows not comparable, with the reason (Result.SetUnknown,
// Result.SetNotComparable). A probability of zero gives ln 0 = -Inf and an
// infinite row; rows keep their infinities and are never dropped (JSON
// writes every non-finite number as null; see ReportVersion).
//
// # Comparisons
//
// Compare scores a recurrent model and the baselines on a validation and
// a reported split (HeldOut: token ids and the characters each stands
// for, one denominator for every figure), chooses the best baseline
// (BestBaseline) and the best n-gram, the partner of the interpolated row,
// on validation alone, tunes the interpolation weight there, sets
// bootstrap intervals on the reported split and returns the rows as data
// (Comparison), which Comparison.MarshalJSON writes as the versioned eval
// report. Baseline labels are formatted and parsed in one place
// (BaselineSpec, ParseBaselineLabel).
//
// # Documents, boundaries and padding
//
// Baselines are fitted on training token ids 0..V-1. A boundary token id
// may be given (NoBoundary for none): it ends a document, a line or a
// sentence. It is itself predicted and counted like any other token, and
// the context after it starts afresh, exactly as at the start of the
// sequence. In n-gram counts the positions before the start of a document
// are filled with a padding symbol (id V, never predicted), so the first
// token of every document is counted after n-1 padding symbols (Jurafsky &
// Martin's <s>), and the boundary token plays </s>.
//
// # n-gram smoothers
//
// CountNGrams counts once, at the largest order wanted; NewNGram builds a
// model of any order up to it with one of these methods. CountNGramsOf
// reads the training split through a TokenReader, window by window, and
// keeps the counts within a memory budget (Config.NgramMemory): past it
// they are taken on a seeded subset of the split, and every model built
// from them says so (TrainingNoter, Result.TrainingNote). Below, h is the
// context (the n-1 tokens before w), h' is h without its earliest token,
// c(h w) the count of h followed by w, c(h •) = Σ_w c(h w), N1+(h •) the
// number of distinct tokens seen after h, and V the vocabulary size.
//
// Maximum likelihood, unsmoothed, on the longest context seen in training
// (falling back to shorter ones only when the context never occurred):
//
//	P(w | h) = c(h w) / c(h •)
//
// Add-k (Lidstone 1920; k = 1 is Laplace's add-one, Jurafsky & Martin ch.
// 3), on the full context only:
//
//	P(w | h) = (c(h w) + k) / (c(h •) + k·V)
//
// The other four interpolate recursively with the next shorter context
// and, below the unigram level, with the base distribution
//
//	P_base(w) = 1/V,
//
// so that no token of the vocabulary ever gets probability zero. A
// context never seen in training passes the shorter context's
// distribution through unchanged.
//
// Witten-Bell (Witten & Bell 1991; in the interpolated form of Chen &
// Goodman 1998):
//
//	P(w | h) = (c(h w) + N1+(h •)·P(w | h')) / (c(h •) + N1+(h •))
//
// Absolute discounting (Ney, Essen & Kneser 1994; Chen & Goodman 1998),
// with D from 0 to 1:
//
//	P(w | h) = max(c(h w) - D, 0)/c(h •) + D·N1+(h •)/c(h •) · P(w | h')
//
// Interpolated Kneser-Ney (Kneser & Ney 1995; Chen & Goodman 1998):
// absolute discounting at the highest order, and at every lower order the
// counts replaced by continuation counts, the number of distinct tokens
// seen before the n-gram, N1+(• h w), with totals Σ_w N1+(• h w).
//
// Modified Kneser-Ney (Chen & Goodman 1998): as Kneser-Ney, with
// three discounts D(c) = D1, D2, D3+ for counts 1, 2 and 3 or more, and the
// lower-order weight
//
//	γ(h) = [D1·N1(h •) + D2·N2(h •) + D3+·N3+(h •)] / Σ_w c(h w)
//
// where Nr(h •) counts the tokens seen exactly r (or at least 3) times
// after h, under the counts of that order.
//
// Discounts are estimated for each order separately from its
// count-of-counts n1..n4 (the number of n-grams of that order whose count,
// raw at the top order and continuation below for the Kneser-Ney methods,
// is 1..4): D = n1/(n1+2·n2) (Ney, Essen & Kneser 1994) and D1, D2, D3+ by
// ModifiedDiscounts (Chen & Goodman 1998), unless fixed values are
// given in Smoothing. Smoothing.NoFloor drops the uniform base, leaving
// the plain unigram estimate (relative frequency, or continuation
// frequency for the Kneser-Ney methods) at the bottom; it exists to
// reproduce other implementations in tests.
//
// MarkovChain is the fixed-order chain of context length k with additive
// smoothing, the add-k model of order k+1 under its own name.
//
// # Hidden Markov models
//
// HMM is a discrete hidden Markov model with N states trained by
// Baum-Welch (TrainHMM): seeded initialisation, the scaled forward-
// backward algorithm (Rabiner 1989), stopping on a relative log-likelihood
// change below a tolerance or at an iteration cap. It scores by the
// forward algorithm, carrying its filtered state distribution through the
// text (resetting to π after a boundary token), so it remembers at most
// log2 N bits of the past (StateBits). Viterbi and Posteriors decode.
// When scoring, emissions are interpolated with the add-one unigram
// distribution of the whole training split (TrainHMM documents the
// weights): a symbol the HMM's own training tokens lacked (it trains on
// at most hmm_max_tokens of them) is predicted at about its unigram rate,
// and every symbol keeps a probability.
//
// # Interpolation
//
// Mixture mixes two models linearly, λ·P_A + (1-λ)·P_B; TuneMixture fits
// λ on validation log-probabilities by EM.
//
// # Breakdowns
//
// Marked scores a caller-given subset of positions (a per-token mask, see
// MarkIndices) against the rest; FrequencyBands groups tokens by their
// training count in decades (unseen, 1, 2-9, 10-99, ...). Both report bits
// per character of the subset: its bits over the characters its tokens
// span.
//
// # Bootstrap intervals
//
// Bootstrap gives percentile intervals for every model's bits per
// character and for its difference from a reference model by a paired
// moving-block bootstrap (Künsch 1989): blocks of about BlockChars
// characters that may start at any of 32 positions per block length (a
// token belongs to the block holding its first character), drawn with
// replacement, seeded, as many as cover the text, and all models scored on
// the same drawn blocks, so their difference is measured on identical
// text. Compare asks for at least MinBootstrapBlocks blocks and shrinks
// them, with a note, when the text is shorter (PlanBlocks). Series.Masked
// restricts the bootstrap to marked positions.
//
// # Progress and files
//
// Long steps take an optional ProgressFunc; the package never prints.
// SaveCounts and SaveHMM cache fitted baselines in a versioned file format
// with a SHA-256 checksum (its layout is documented on FormatVersion);
// loading a damaged file gives an error wrapping ErrCorrupt.
package eval
