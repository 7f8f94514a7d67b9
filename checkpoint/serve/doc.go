// Package serve is the scoring service behind 'weft serve': an HTTP
// handler that scores lines (alone or in the context of their stream) and
// continues prompts with one trained model, loaded once and shared
// read-only by every request, and the Go client of that service.
//
// # Endpoints
//
// Every body is JSON (UTF-8); every answer is JSON, or newline-delimited
// JSON for /v1/score/lines. Unknown fields are errors.
//
//	GET  /v1/health       {"status":"ok","generation":1}; 503 "draining" during a drain
//	GET  /v1/model        the model's facts (Facts)
//	POST /v1/score        ScoreRequest → ScoreResponse
//	POST /v1/score/lines  one LineRequest per line in → one ScoredLine per line out, as each is scored
//	POST /v1/sample       SampleRequest → SampleResponse (text marked generated)
//	POST /v1/reload       load the checkpoint again → Facts, or an error while the old model keeps serving
//
// A scored line is what 'weft score' prints for it (the same engine,
// eval/surprise, and the same numbers, not rounded): its bits, bits per
// character, most surprising token with its offset, unknown tokens, and
// with per_token the bits of every token. The line end counts as one
// character and is predicted, as with 'weft score --unit line'.
//
// # Streams
//
// A line scored with a stream name is scored in the context of every line
// scored before under that name: the model's state is carried from one
// request to the next, so the numbers are those of 'weft score --context N'
// on the stream's lines concatenated, with N covering them all, without
// reading them again. Without a name each line is scored from the start of
// a document, like 'weft score' without --context. The service keeps at
// most Limits.MaxStreams streams; when a new one would pass that, the
// stream used least recently is dropped, and a later line under its name
// starts afresh (its row says stream_start). A reload also starts every
// stream afresh: a state belongs to the weights that made it. Lines of one
// stream are scored one request at a time, in the order they arrive.
//
// # Limits
//
// Limits caps the request body, a line's characters, the lines of one
// request, a sample's length and count, and the streams kept; a request
// over a cap is refused with 413 and a one-line error naming the cap. Bad
// JSON, invalid UTF-8, an unknown field or stream option is 400. The
// service sets deadlines on reading each request and writing each answer
// (Limits.ReadTimeout, Limits.WriteTimeout), so a slow client holds up
// only its own request.
//
// # Batching
//
// Concurrent requests share batches: the lines waiting when a scoring
// worker is free (up to rnn.BatchStreams, after waiting at most
// Limits.BatchWait for more) run as the parallel streams of one forward
// pass (rnn.BatchScorer), each with its own state. The numbers do not
// depend on which lines share a batch.
//
// # Reload and drain
//
// Reload loads the checkpoint again through the Loader; the new model
// serves every request that starts after it, while requests already
// running finish on the old one. A checkpoint that fails to load (damaged,
// missing, of another shape) is refused and the old model keeps serving.
// Serve stops accepting connections when its context ends, lets the
// requests in flight finish (up to Limits.DrainTimeout), then returns.
package serve
