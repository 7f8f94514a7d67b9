// Package checkpoint stores training checkpoints: named tensors plus string
// metadata, in the open safetensors layout so that a general framework can
// read the weights, with a format version and a checksum added. It also
// owns the run directory's periodic checkpoints, their retention, and the
// lock that keeps two runs out of one directory.
//
// The package knows nothing about models: a checkpoint is a File holding
// Tensors and Meta. The trainer decides the names and puts its resolved
// config, vocabulary and trainer state into Meta as JSON strings.
//
// # Byte layout
//
// A checkpoint of format version 1 is, with all integers little-endian:
//
//	offset      size  content
//	0           8     N, unsigned 64-bit: length of the header in bytes
//	8           N     header: a JSON object, UTF-8, padded with spaces (0x20)
//	                  so that 8+N is a multiple of 8
//	8+N         D     data buffer: each tensor's elements, row-major and
//	                  contiguous, at its data_offsets
//
// The header maps "__metadata__" to an object of string values and each
// tensor name to its entry:
//
//	{"__metadata__":{"KEY":"VALUE",...},
//	 "NAME":{"dtype":"F32","shape":[D0,D1,...],"data_offsets":[BEGIN,END]},...}
//
// BEGIN and END are byte offsets into the data buffer (not the file); END -
// BEGIN is the product of the shape (1 for the scalar shape []) times the
// dtype's size. The dtypes are BOOL, U8, I8, U16, I16, F16, BF16, U32, I32,
// F32, U64, I64 and F64. This much is the public safetensors layout, which
// DecodeSafetensors reads from any writer.
//
// A weft checkpoint is that layout in one canonical form, which Encode
// writes and Decode insists on, so that equal content always gives
// identical bytes:
//
//   - the JSON has no whitespace, and strings are escaped as encoding/json
//     escapes them;
//   - "__metadata__" comes first, its keys sorted bytewise;
//   - tensor entries follow sorted bytewise by name, each with the keys
//     dtype, shape, data_offsets in that order, and their data lies in the
//     buffer in the same order with no gaps;
//   - the header is padded with spaces to the 8-byte boundary, no further.
//
// # Reserved metadata
//
// Keys starting with "weft." belong to this package:
//
//	key                   value
//	weft.format_version   the format version in decimal, "1"
//	weft.checksum         64 lowercase hex digits: the SHA-256 of the file
//
// The checksum is SHA-256 over every byte of the file (length field,
// header with padding, data buffer) in which the 64 characters of the
// weft.checksum value are replaced by 64 ASCII '0' characters (0x30). It
// thus covers every byte except its own digits. To verify it by hand,
// replace the digits by zeros and hash the file.
//
// # Tensor names
//
// The caller chooses the names. By convention two families are kept apart
// so that a framework can take the weights alone:
//
//	prefix   holds                                       example
//	model.   the model's parameters                      model.lstm.0.w_ih
//	optim.   optimizer state, by parameter               optim.adam.m.model.lstm.0.w_ih
//	state.   other trainer tensors (carried state, ...)  state.rng
//
// The recurrent engine documents its own names, shapes and gate order.
//
// # Versions
//
// A checkpoint records its format version; this build reads MinVersion
// through MaxVersion and writes CurrentVersion. The envelope above (the
// layout, the canonical form and the checksum definition) is frozen across
// versions; a new version changes what the tensors and metadata mean. So
// Decode verifies the checksum before it interprets the version: a damaged
// file is always ErrCorrupt, and an intact file of another version is
// ErrVersion. Each supported version keeps a frozen file in testdata that
// the tests must keep loading.
//
// # Verification before use
//
// Decode and Load check, before trusting any of it: the header length
// against MaxHeaderBytes and the file size (before allocating), the JSON,
// the dtypes, that shapes are non-negative and match their byte spans, that
// the spans tile the data buffer exactly, the canonical form, the checksum
// and the version. Every failure is an error wrapping ErrCorrupt (or
// ErrVersion) with a one-line message, never a panic.
//
// # Atomic saves
//
// Save writes a new file next to the target (named .tmp-*), checks that
// every byte was written, fsyncs and closes it, renames it over the target
// and fsyncs the directory. If anything before the rename fails (a full
// disk included), the temporary file is removed and the previous
// checkpoint is untouched. A process killed mid-save leaves at most a
// temporary file, which atomicfile.CleanTemp removes.
//
// # Run directories
//
// Periodic checkpoints are named by step (StepName: step-000001200.safetensors),
// the best validation checkpoint is a separate copy (BestName), and the lock
// file is LockName. List orders periodic checkpoints newest first,
// LoadNewestValid falls back past damaged ones, and Prune keeps the newest
// K plus the best. Lock holds the directory for one process at a time.
package checkpoint
