// Package data turns corpus files into the token streams weft trains and
// evaluates on: it reads and normalizes text, cuts it into tokens, builds
// the vocabulary, splits the corpus, caches the encoded result and yields
// training windows. Prepare runs the whole path; Batches and EvalStreams
// lay the encoded splits out for the trainer and the evaluation.
//
// # Reading
//
// Config.Files lists files, directories and glob patterns, read in the
// order given; a glob's matches are sorted by name, and a directory is
// walked recursively in lexical order, skipping names that start with ".",
// keeping the files whose base name matches Config.Include (all when
// empty) and not Config.Exclude. "-" is standard input, which is copied to
// a temporary file so that it can be read once per pass. Each file is a
// document; files are joined as they are.
//
// Reading streams in chunks of 64 KiB, so counting and encoding hold a
// bounded amount of text whatever the corpus size (a single piece of text
// longer than memory aside). Each file is normalized:
//
//   - a UTF-8 byte-order mark at the start of a file is stripped (and
//     counted);
//   - each CRLF pair becomes "\n" (counted); a lone "\r" stays;
//   - a NUL byte is an error (ErrBinary): no text corpus has one;
//   - bytes that are not UTF-8 are an error (ErrInvalidUTF8) naming the
//     file, line and byte offset, or with invalid_utf8 = "replace" each
//     such byte becomes U+FFFD (counted).
//
// Errors about a place in a file are *ParseError values with File, Line
// and Offset, as encoding/csv's are. Other bad input (a missing file, a
// directory or glob with no matching files, an empty or whitespace-only
// corpus, a split too small for its fraction or for the batch shape) gives
// a one-line error naming the file; ErrEmpty and ErrTooSmall tell the
// kinds apart. Characters below are runes of the normalized text; a line
// is a run of characters ended by "\n" or by the end of a file.
//
// # Tokenizers
//
// Each tokenizer cuts normalized text into pieces; the vocabulary maps
// each piece to a token id. No piece spans a "\n", so the pieces of a line
// do not depend on the lines around it, nor on how the input was chunked.
//
//   - char: one piece per Unicode code point. decode(encode(x)) == x.
//   - byte: one piece per byte of the UTF-8 encoding. decode(encode(x)) == x.
//   - word: a piece is a maximal run of letters and marks
//     (unicode.IsLetter, unicode.IsMark), a maximal run of numbers
//     (unicode.IsNumber), a maximal run of spaces other than "\n"
//     (unicode.IsSpace), or a single rune of any other kind ("\n",
//     punctuation, symbols). So "It's 1851—naïve  whales!" is "It", "'",
//     "s", " ", "1851", "—", "naïve", "  ", "whales", "!". Nothing is
//     dropped: decode(encode(x)) == x. With lowercase = true each piece is
//     folded by unicode.ToLower first, which is lossy: decoding gives the
//     lower-cased text.
//   - bpe: the pieces of word, each further cut by byte-pair merges
//     learned on the training split (Sennrich, Haddow & Birch 2016). The
//     symbols start as the characters of each piece; each merge joins the
//     most frequent adjacent pair (counted over the training pieces,
//     weighted by their counts) into a new symbol; learning stops after
//     bpe_merges merges or when no pair occurs twice. Ties go to the pair
//     whose left, then right, symbol sorts first by bytes, so the same
//     training text always gives the same merges. Encoding applies the
//     merges to each piece in the order learned (lowest rank first, each
//     at every place it occurs, left to right). Unlike the paper no
//     end-of-word marker is added, since spaces are pieces of their own;
//     pieces longer than 64 characters are left unmerged, in learning and
//     encoding alike. decode(encode(x)) == x (lower-cased with lowercase).
//   - symbols: whitespace-separated symbols taken as they are (event
//     codes, notes, bases), and one "\n" piece per line end; other
//     whitespace only separates. Decoding joins the symbols of a line
//     with single spaces, so decode(encode(x)) == x exactly when x has no
//     leading, trailing or repeated whitespace inside its lines; blank
//     lines are kept.
//
// # Vocabulary
//
// The vocabulary is built from the training split only. Id 0 is the
// unknown entry UnknownPiece, which every piece without an entry maps to
// and which decodes to U+FFFD. With boundary = "line", id 1 is LinePiece:
// every "\n" is encoded as it and it decodes to "\n". With boundary =
// "document", id 1 is DocumentPiece, appended after the tokens of each
// file and decoding to nothing. The other entries are the training pieces
// that occur at least min_count times, most frequent first, ties broken by
// the piece's bytes, cut to max_vocabulary entries in all. The share of
// unknown tokens is each split's OOV rate.
//
// Vocab.WriteFile saves the vocabulary as JSON (VocabFile in a run
// directory):
//
//	{"format": "weft-vocabulary", "version": 1, "tokenizer": "bpe",
//	 "lowercase": false, "boundary": "",
//	 "entries": [{"piece": "<unk>", "count": 0}, {"piece": "e", "count": 9512}, ...],
//	 "bpe_alphabet": ["a", "b", ...], "bpe_merges": [["t", "h"], ["th", "e"], ...]}
//
// The position in entries is the id; count is the training count. Byte
// pieces are written as two lowercase hex digits. bpe_alphabet (the
// characters of the training pieces) and bpe_merges (in the order learned)
// are present for bpe only.
//
// # Splits
//
// The corpus is cut into training, validation and test splits by
// validation_fraction v and test_fraction t, in one of three ways:
//
//   - contiguous (the default): with N characters in all, training holds
//     characters [0, c1), validation [c1, c2) and test [c2, N), where
//     c1 = round(N·(1−v−t)) and c2 = round(N·(1−t)). A cut may fall inside
//     a line (or a word): that line counts in both splits, and the piece
//     cut in two is two pieces. Split.Offset is the split's first
//     character in the corpus.
//   - line: line number i (from 0, over the whole corpus) goes to a split
//     by u = splitmix64(split_seed XOR splitmix64(i)) / 2^64: validation
//     when u < v, test when v ≤ u < v+t, training otherwise.
//   - document: the same with file number i.
//
// The same files and settings always give the same splits. A split's
// tokens follow corpus order. Each split reports its characters, tokens,
// lines and OOV rate (Report). Leakage is counted too: the number of test
// lines, blank ones aside, whose exact text (compared by a 64-bit FNV-1a
// hash) also occurs as a line of the training split; a high count flatters
// every model on the test split.
//
// Split.TokenChars gives the characters each token stands for, so that
// bits per character can be summed per token (for symbols the separating
// whitespace belongs to no token).
//
// # Encoded cache
//
// Prepare caches its result as TokenCacheFile in the cache folder (the run
// directory) and reuses it while the key matches. The key is the SHA-256
// of the cache format version, every data setting but the file list, and
// for each file its absolute path, size and modification time in
// nanoseconds (for standard input, the SHA-256 of its bytes): touching or
// changing a file, or any setting, rebuilds the cache. Contents are not
// hashed, so an edit that keeps the size and the modification time goes
// unseen. A cache whose bytes fail any check (length, checksum, magic,
// version, an id outside the vocabulary) is reported in CacheInfo.Damaged,
// never trusted, and rebuilt. All integers are little-endian:
//
//	offset      size     field
//	0           8        magic "WEFTTOKS"
//	8           4        format version, uint32 (1)
//	12          32       key, SHA-256 as above
//	44          4        id width w in bytes, uint32: 2 when the vocabulary
//	                     has at most 65536 entries, else 4
//	48          8        metadata length M, uint64
//	56          M        metadata, JSON: the vocabulary (as in the file
//	                     above), the input stats, the report, and per split
//	                     its characters, lines, OOV count and offset
//	56+M        ...      three split blocks, train, validation, test, each:
//	                       8      token count n, uint64
//	                       n·w    token ids
//	                       8      record count k, uint64
//	                       k·12   (token index uint64, characters int32) for
//	                              each token whose characters differ from
//	                              its entry's (unknown words, lower-casing)
//	end−4       4        CRC-32C (Castagnoli) of every byte before it
//
// Corpora larger than memory: Prepare never holds a split. It reads the
// files in 64 KiB pieces, spools each split's ids to a temporary file in
// the cache folder as it encodes them, and writes the cache from those in
// one streaming pass, taking the checksum as the bytes go out. Opening a
// cache checks every byte in one streaming pass, then maps the file
// read-only (Linux, macOS and the BSDs; elsewhere, and where mapping
// fails, the splits read the file window by window), so that a Split's
// Tokens is a view of the file, not a copy: training windows, validation
// and the character counts read the ids a window at a time. A reader gives
// the mapped pages back to the system every 64 MiB it reads, so they do
// not accumulate in its resident memory. What Prepare holds grows with the
// vocabulary, the distinct test lines (8-byte hashes, for the leakage
// count), the records of tokens whose characters differ from their
// entry's (12 bytes each) and, for the word and BPE tokenizers, the
// distinct training pieces; not with the corpus. For "bpe" on a corpus
// over BPESampleBytes the merges are learned on a seeded sample of the
// piece occurrences, reported in Report.BPESample.
//
// # Batches
//
// NewBatches lays the N training tokens out as B contiguous streams of
// L = (N−1)/B inputs: stream b is tokens b·L … b·L+L−1 and its targets are
// the tokens one further on. Window after window walks all streams forward
// together by T steps (the last window of an epoch takes what is left), so
// the state a model ends one window with is the right start for the same
// stream in the next. A Batch is time-major: the token of stream b at step
// t is Inputs[t·B+b]. With a Variation, window lengths are drawn in
// (T·(1−Variation), T] from a hash of the seed, the epoch and the window
// number, never above T. Next returns io.EOF once at the end of each
// epoch, counts the epoch (Batches.Epoch) and starts the next from the
// beginning on the following call. Cursor is the position as six
// integers; restoring it with SetCursor continues with exactly the next
// window.
//
// EvalStreams (and Split.Streams) cut a held-out split into S contiguous
// runs in order, the first N mod S one token longer, to be scored as S
// continuous streams.
//
// # Demo corpus
//
// Package data/demo generates the built-in demo corpus, a harbour dispatch
// log whose long-range predictable character positions it reports; see its
// documentation for the exact rules.
package data
