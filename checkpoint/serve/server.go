package serve

import (
	"bufio"
	"bytes"
	"container/list"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"net"
	"net/http"
	"runtime"
	"strings"
	"sync"
	"sync/atomic"
	"time"
	"unicode/utf8"

	"weft/checkpoint"
	"weft/checkpoint/generate"
	"weft/checkpoint/runs"
	"weft/data"
	"weft/eval/surprise"
	"weft/rnn"
)

// Limits bound what one request may ask and how long it may take. A zero
// field takes its default (DefaultLimits).
type Limits struct {
	// MaxBodyBytes caps a request body, in bytes (max_body_bytes). Default
	// 1 MiB. For /v1/score/lines it caps each input line instead.
	MaxBodyBytes int64
	// MaxLineChars caps a scored line, in characters (max_line_chars).
	// Default 4096.
	MaxLineChars int
	// MaxBatchLines caps the lines of one score request (max_batch_lines).
	// Default 256.
	MaxBatchLines int
	// MaxSampleTokens caps a sample's length in tokens (max_sample_tokens;
	// a length in characters counts as Length.MaxTokens). Default 2000.
	MaxSampleTokens int
	// MaxSamples caps the continuations of one sample request
	// (max_samples). Default 16.
	MaxSamples int
	// MaxStreams is the number of carried streams kept (max_streams);
	// the least recently used is dropped past it. Default 1024.
	MaxStreams int
	// Workers is the number of batches scored at once. Default
	// GOMAXPROCS.
	Workers int
	// BatchWait is how long a free worker waits for more lines to join a
	// batch once it has one. Default 500µs; negative: no wait.
	BatchWait time.Duration
	// ReadTimeout bounds reading a request (for /v1/score/lines, the wait
	// for each input line). Default 30s.
	ReadTimeout time.Duration
	// WriteTimeout bounds writing each answer (each row of
	// /v1/score/lines). Default 30s.
	WriteTimeout time.Duration
	// DrainTimeout bounds the drain when Serve's context ends. Default
	// 30s.
	DrainTimeout time.Duration
}

// DefaultLimits returns the defaults documented on Limits.
func DefaultLimits() Limits {
	return Limits{MaxBodyBytes: 1 << 20, MaxLineChars: 4096, MaxBatchLines: 256, MaxSampleTokens: 2000, MaxSamples: 16,
		MaxStreams: 1024, Workers: runtime.GOMAXPROCS(0), BatchWait: 500 * time.Microsecond,
		ReadTimeout: 30 * time.Second, WriteTimeout: 30 * time.Second, DrainTimeout: 30 * time.Second}
}

func (l Limits) withDefaults() Limits {
	d := DefaultLimits()
	set := func(v *int, def int) {
		if *v == 0 {
			*v = def
		}
	}
	if l.MaxBodyBytes == 0 {
		l.MaxBodyBytes = d.MaxBodyBytes
	}
	set(&l.MaxLineChars, d.MaxLineChars)
	set(&l.MaxBatchLines, d.MaxBatchLines)
	set(&l.MaxSampleTokens, d.MaxSampleTokens)
	set(&l.MaxSamples, d.MaxSamples)
	set(&l.MaxStreams, d.MaxStreams)
	set(&l.Workers, d.Workers)
	for _, p := range []*time.Duration{&l.ReadTimeout, &l.WriteTimeout, &l.DrainTimeout} {
		if *p == 0 {
			*p = 30 * time.Second
		}
	}
	if l.BatchWait == 0 {
		l.BatchWait = d.BatchWait
	}
	return l
}

// Validate reports the first limit out of range.
func (l Limits) Validate() error {
	switch {
	case l.MaxBodyBytes < 0:
		return fmt.Errorf("max_body_bytes must be positive, got %d", l.MaxBodyBytes)
	case l.MaxLineChars < 0:
		return fmt.Errorf("max_line_chars must be positive, got %d", l.MaxLineChars)
	case l.MaxBatchLines < 0:
		return fmt.Errorf("max_batch_lines must be positive, got %d", l.MaxBatchLines)
	case l.MaxSampleTokens < 0:
		return fmt.Errorf("max_sample_tokens must be positive, got %d", l.MaxSampleTokens)
	case l.MaxSamples < 0:
		return fmt.Errorf("max_samples must be positive, got %d", l.MaxSamples)
	case l.MaxStreams < 0:
		return fmt.Errorf("max_streams must be positive, got %d", l.MaxStreams)
	case l.Workers < 0:
		return fmt.Errorf("workers must be positive, got %d", l.Workers)
	}
	return nil
}

// Loader loads the model to serve: at start and at every reload.
type Loader func() (*Loaded, error)

// Loaded is a loaded model with what the service reports about it.
type Loaded struct {
	Model *checkpoint.Model
	// Validation is the run's best validation, when the checkpoint
	// records one.
	Validation *checkpoint.Progress
}

// FileLoader loads the checkpoint file at path.
func FileLoader(path string) Loader {
	return func() (*Loaded, error) { return loadPath(path) }
}

// RunLoader loads a run directory's checkpoint which ("best", "latest", a
// step or a file name; see runs.OpenModel) afresh at each call, so that a
// reload picks up a newer best checkpoint.
func RunLoader(dir, which string) Loader {
	return func() (*Loaded, error) {
		m, err := runs.OpenModel(dir, which)
		if err != nil {
			return nil, err
		}
		// Load the file again to read its progress with the weights
		// from one read of one file.
		return loadPath(m.Path)
	}
}

func loadPath(path string) (*Loaded, error) {
	f, err := checkpoint.Load(path)
	if err != nil {
		return nil, err
	}
	m, err := checkpoint.ModelFromFile(f, path)
	if err != nil {
		return nil, fmt.Errorf("load model %q: %w", path, err)
	}
	l := &Loaded{Model: m}
	if p, err := checkpoint.ReadProgress(f); err == nil && p.HaveBest {
		l.Validation = &p
	}
	return l, nil
}

// served is one loaded model as the service holds it.
type served struct {
	m     *checkpoint.Model
	facts Facts
}

// Server is the scoring service. Create it with New; serve its Handler,
// or call Serve.
type Server struct {
	lim  Limits
	load Loader
	now  func() time.Time

	cur      atomic.Pointer[served]
	reloadMu sync.Mutex
	draining atomic.Bool

	streams *streams
	jobs    chan *job
	wg      sync.WaitGroup
	closed  chan struct{}
	once    sync.Once
}

// New loads the model through load and starts the scoring workers; Close
// stops them.
func New(load Loader, lim Limits) (*Server, error) {
	if err := lim.Validate(); err != nil {
		return nil, err
	}
	lim = lim.withDefaults()
	s := &Server{lim: lim, load: load, now: time.Now, jobs: make(chan *job, 4*rnn.BatchStreams), closed: make(chan struct{})}
	s.streams = newStreams(lim.MaxStreams)
	l, err := load()
	if err != nil {
		return nil, err
	}
	s.cur.Store(s.wrap(l, 1))
	for i := 0; i < lim.Workers; i++ {
		s.wg.Add(1)
		go s.worker()
	}
	return s, nil
}

// Close stops the scoring workers; call it after the last request.
func (s *Server) Close() {
	s.once.Do(func() { close(s.closed) })
	s.wg.Wait()
}

func (s *Server) wrap(l *Loaded, gen int) *served {
	m := l.Model
	c := m.Config
	f := Facts{
		ModelRef: ModelRef{Name: m.Net.Name(), Step: m.Step, Generation: gen},
		Path:     m.Path, LoadedAt: s.now().UTC(),
		Cell: m.Net.Cell().Name(), Layers: c.Layers, HiddenSize: c.HiddenSize, EmbeddingSize: c.EmbeddingSize,
		ProjectionSize: c.ProjectionSize, OutputLayer: m.Net.Config().OutputLayer, Parameters: m.Net.NumParams(),
		VocabSize: m.Vocab.Len(), Tokenizer: m.Vocab.Kind().String(),
	}
	if l.Validation != nil {
		bpc, step := l.Validation.BestBitsPerChar, l.Validation.BestStep
		f.ValidationBitsPerChar, f.ValidationStep = &bpc, &step
	}
	return &served{m: m, facts: f}
}

// Facts describes the model now serving.
func (s *Server) Facts() Facts { return s.cur.Load().facts }

// Reload loads the model again; on success it serves every request from
// now on, and every stream starts afresh. On an error the model serving
// before keeps serving.
func (s *Server) Reload() (Facts, error) {
	s.reloadMu.Lock()
	defer s.reloadMu.Unlock()
	old := s.cur.Load()
	l, err := s.load()
	if err != nil {
		return old.facts, fmt.Errorf("reload refused, still serving %s step %d: %w", old.facts.Name, old.facts.Step, err)
	}
	if l.Model.Vocab.Len() < 1 {
		return old.facts, fmt.Errorf("reload refused, still serving %s step %d: empty vocabulary", old.facts.Name, old.facts.Step)
	}
	nw := s.wrap(l, old.facts.Generation+1)
	s.cur.Store(nw)
	return nw.facts, nil
}

// Handler returns the service's HTTP handler.
func (s *Server) Handler() http.Handler {
	mux := http.NewServeMux()
	mux.HandleFunc("GET /v1/health", s.health)
	mux.HandleFunc("GET /v1/model", s.model)
	mux.HandleFunc("POST /v1/score", s.score)
	mux.HandleFunc("POST /v1/score/lines", s.scoreLines)
	mux.HandleFunc("POST /v1/sample", s.sample)
	mux.HandleFunc("POST /v1/reload", s.reload)
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		h, pattern := mux.Handler(r)
		if pattern == "" {
			// The mux's own 404 and 405 answers, as one-line JSON errors.
			rec := &statusOnly{}
			h.ServeHTTP(rec, r)
			msg := fmt.Sprintf("no endpoint %s %s", r.Method, r.URL.Path)
			if rec.code == http.StatusMethodNotAllowed {
				msg = fmt.Sprintf("%s does not take %s", r.URL.Path, r.Method)
				w.Header().Set("Allow", rec.Header().Get("Allow"))
			}
			writeError(w, rec.code, msg)
			return
		}
		h.ServeHTTP(w, r)
	})
}

// statusOnly records the status of the mux's not-found answers.
type statusOnly struct {
	h    http.Header
	code int
}

func (r *statusOnly) Header() http.Header {
	if r.h == nil {
		r.h = http.Header{}
	}
	return r.h
}
func (r *statusOnly) Write(b []byte) (int, error) { return len(b), nil }
func (r *statusOnly) WriteHeader(code int)        { r.code = code }

// Serve answers on ln until ctx ends, then stops accepting connections,
// lets the requests in flight finish (up to DrainTimeout) and returns nil.
func (s *Server) Serve(ctx context.Context, ln net.Listener) error {
	hs := &http.Server{
		Handler:           s.Handler(),
		ReadHeaderTimeout: s.lim.ReadTimeout,
		IdleTimeout:       2 * s.lim.ReadTimeout,
		MaxHeaderBytes:    64 << 10,
		ErrorLog:          nil,
	}
	errc := make(chan error, 1)
	go func() { errc <- hs.Serve(ln) }()
	select {
	case err := <-errc:
		return err
	case <-ctx.Done():
	}
	s.draining.Store(true)
	dctx, cancel := context.WithTimeout(context.Background(), s.lim.DrainTimeout)
	defer cancel()
	err := hs.Shutdown(dctx)
	<-errc
	if err != nil {
		hs.Close()
		return fmt.Errorf("drain: %w", err)
	}
	return nil
}

// ---- answers ----

func writeJSON(w http.ResponseWriter, code int, v any) {
	var buf bytes.Buffer
	enc := json.NewEncoder(&buf)
	enc.SetEscapeHTML(false)
	b := []byte(`{"error":"encode answer"}` + "\n")
	if err := enc.Encode(v); err == nil {
		b = buf.Bytes()
	} else {
		code = http.StatusInternalServerError
	}
	w.Header().Set("Content-Type", "application/json")
	w.WriteHeader(code)
	w.Write(b)
}

func writeError(w http.ResponseWriter, code int, msg string) {
	writeJSON(w, code, errorBody{Error: oneLine(msg)})
}

func oneLine(s string) string {
	return strings.Join(strings.Fields(s), " ")
}

// requestError is an error answered with a status.
type requestError struct {
	code int
	msg  string
}

func (e *requestError) Error() string { return e.msg }

func badRequest(format string, a ...any) error {
	return &requestError{http.StatusBadRequest, fmt.Sprintf(format, a...)}
}

func tooLarge(format string, a ...any) error {
	return &requestError{http.StatusRequestEntityTooLarge, fmt.Sprintf(format, a...)}
}

func answerError(w http.ResponseWriter, err error) {
	var re *requestError
	switch {
	case errors.As(err, &re):
		writeError(w, re.code, re.msg)
	case errors.Is(err, context.DeadlineExceeded), errors.Is(err, context.Canceled):
		writeError(w, http.StatusServiceUnavailable, "request cancelled: "+err.Error())
	default:
		writeError(w, http.StatusInternalServerError, err.Error())
	}
}

// readBody reads a whole request body within MaxBodyBytes and the read
// deadline, and checks that it is UTF-8.
func (s *Server) readBody(w http.ResponseWriter, r *http.Request) ([]byte, error) {
	rc := http.NewResponseController(w)
	_ = rc.SetReadDeadline(s.now().Add(s.lim.ReadTimeout))
	b, err := io.ReadAll(http.MaxBytesReader(w, r.Body, s.lim.MaxBodyBytes))
	var mb *http.MaxBytesError
	if errors.As(err, &mb) {
		return nil, tooLarge("request body over the limit of %d bytes (max_body_bytes)", s.lim.MaxBodyBytes)
	}
	if err != nil {
		return nil, badRequest("read request body: %v", err)
	}
	if !utf8.Valid(b) {
		return nil, badRequest("request body is not valid UTF-8")
	}
	return b, nil
}

// decodeStrict decodes one JSON value into v: unknown fields, trailing
// data and a "stream" that is not a StreamOptions object are errors.
func decodeStrict(b []byte, v any) error {
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(v); err != nil {
		return jsonError(err)
	}
	if dec.More() {
		return badRequest("request body holds more than one JSON value")
	}
	return nil
}

// jsonError turns a decoding error into a one-line 400.
func jsonError(err error) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	msg := err.Error()
	switch {
	case errors.As(err, &se):
		return badRequest("malformed JSON at byte %d: %s", se.Offset, strings.TrimPrefix(msg, "json: "))
	case errors.As(err, &te):
		if te.Field != "" {
			return badRequest("field %q: want %s, got JSON %s", te.Field, te.Type, te.Value)
		}
		return badRequest("want a JSON object, got JSON %s", te.Value)
	case errors.Is(err, io.EOF):
		return badRequest("empty request body: want a JSON object")
	case errors.Is(err, io.ErrUnexpectedEOF):
		return badRequest("malformed JSON: the body ends inside a value")
	case strings.HasPrefix(msg, "json: unknown field "):
		field := strings.TrimPrefix(msg, "json: unknown field ")
		return badRequest("unknown field %s", field)
	}
	return badRequest("malformed JSON: %s", strings.TrimPrefix(msg, "json: "))
}

// ---- endpoints ----

func (s *Server) health(w http.ResponseWriter, r *http.Request) {
	h := Health{Status: "ok", Generation: s.cur.Load().facts.Generation, Streams: s.streams.len()}
	code := http.StatusOK
	if s.draining.Load() {
		h.Status, code = "draining", http.StatusServiceUnavailable
	}
	writeJSON(w, code, h)
}

func (s *Server) model(w http.ResponseWriter, r *http.Request) {
	writeJSON(w, http.StatusOK, s.cur.Load().facts)
}

func (s *Server) reload(w http.ResponseWriter, r *http.Request) {
	if _, err := s.readBody(w, r); err != nil {
		answerError(w, err)
		return
	}
	f, err := s.Reload()
	if err != nil {
		writeError(w, http.StatusInternalServerError, err.Error())
		return
	}
	writeJSON(w, http.StatusOK, f)
}

// streamRequest decodes the stream options strictly, so that an unknown
// option is named as one.
type rawScoreRequest struct {
	Lines    []string        `json:"lines"`
	Stream   json.RawMessage `json:"stream"`
	PerToken bool            `json:"per_token"`
}

type rawLineRequest struct {
	Line     *string         `json:"line"`
	Stream   json.RawMessage `json:"stream"`
	PerToken bool            `json:"per_token"`
}

func decodeStream(raw json.RawMessage) (*StreamOptions, error) {
	if len(raw) == 0 || string(raw) == "null" {
		return nil, nil
	}
	var so StreamOptions
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&so); err != nil {
		msg := err.Error()
		if strings.HasPrefix(msg, "json: unknown field ") {
			return nil, badRequest("unknown stream option %s: want name and reset", strings.TrimPrefix(msg, "json: unknown field "))
		}
		return nil, badRequest("stream: want an object {\"name\": ..., \"reset\": ...}")
	}
	if so.Name == "" || len(so.Name) > 200 {
		return nil, badRequest("stream name must be 1 to 200 bytes, got %d", len(so.Name))
	}
	return &so, nil
}

func (s *Server) checkLine(i int, line string) error {
	if strings.ContainsAny(line, "\n") {
		return badRequest("line %d holds a line end: send each line on its own", i)
	}
	if n := utf8.RuneCountInString(line); n > s.lim.MaxLineChars {
		return tooLarge("line %d is %d characters, over the limit of %d (max_line_chars)", i, n, s.lim.MaxLineChars)
	}
	return nil
}

func (s *Server) score(w http.ResponseWriter, r *http.Request) {
	b, err := s.readBody(w, r)
	if err != nil {
		answerError(w, err)
		return
	}
	var req rawScoreRequest
	if err := decodeStrict(b, &req); err != nil {
		answerError(w, err)
		return
	}
	so, err := decodeStream(req.Stream)
	if err != nil {
		answerError(w, err)
		return
	}
	if len(req.Lines) == 0 {
		answerError(w, badRequest("no lines to score: give \"lines\": [\"...\"]"))
		return
	}
	if len(req.Lines) > s.lim.MaxBatchLines {
		answerError(w, tooLarge("%d lines, over the limit of %d per request (max_batch_lines)", len(req.Lines), s.lim.MaxBatchLines))
		return
	}
	for i, l := range req.Lines {
		if err := s.checkLine(i+1, l); err != nil {
			answerError(w, err)
			return
		}
	}
	sv := s.cur.Load()
	rows, err := s.scoreLines1(r.Context(), sv, req.Lines, so, req.PerToken)
	if err != nil {
		answerError(w, err)
		return
	}
	_ = http.NewResponseController(w).SetWriteDeadline(s.now().Add(s.lim.WriteTimeout))
	writeJSON(w, http.StatusOK, ScoreResponse{Model: sv.facts.ModelRef, Rows: rows})
}

// scoreLines1 scores lines with the model sv, in the stream so when it is
// not nil.
func (s *Server) scoreLines1(ctx context.Context, sv *served, lines []string, so *StreamOptions, perToken bool) ([]ScoredLine, error) {
	v := sv.m.Vocab
	seqs := make([][]int, len(lines))
	chars := make([][]int, len(lines))
	for i, l := range lines {
		err := v.EncodeReader(ctx, strings.NewReader(l+"\n"), "line", func(id, c int) {
			seqs[i] = append(seqs[i], id)
			chars[i] = append(chars[i], c)
		})
		if err != nil {
			return nil, badRequest("line %d: %v", i+1, err)
		}
	}
	rows := make([]ScoredLine, len(lines))
	dst := make([][]float64, len(lines))
	for i := range dst {
		dst[i] = make([]float64, len(seqs[i]))
	}
	source := "request"
	first := 1
	if so == nil {
		if err := s.run(ctx, sv, dst, seqs, nil); err != nil {
			return nil, err
		}
		for i := range rows {
			rows[i].StreamStart = true
		}
	} else {
		// The stream's lines in order, each after the one before, are one
		// sequence continuing the stream's carried state: scored as one
		// row, then cut back into lines. One request at a time per stream.
		st := s.streams.get(so.Name)
		defer st.mu.Unlock()
		if so.Reset || st.gen != sv.facts.Generation || st.carry == nil {
			st.carry, st.gen, st.lines = sv.m.Net.NewCarry(), sv.facts.Generation, 0
		}
		source, first = so.Name, st.lines+1
		rows[0].StreamStart = !st.carry.Started()
		var all []int
		for _, seq := range seqs {
			all = append(all, seq...)
		}
		lp := make([]float64, len(all))
		if err := s.run(ctx, sv, [][]float64{lp}, [][]int{all}, []*rnn.Carry[float32]{st.carry}); err != nil {
			// The carry may be part-way: start the stream afresh.
			st.carry = nil
			return nil, err
		}
		for i, k := 0, 0; i < len(seqs); i++ {
			copy(dst[i], lp[k:k+len(seqs[i])])
			k += len(seqs[i])
		}
		st.lines += len(lines)
	}
	for i := range rows {
		rows[i].Row = surprise.LineRow(sv.m.Net.Name(), "rnn", v, seqs[i], chars[i], dst[i], strings.TrimSuffix(lines[i], "\n"), source, first+i)
		if perToken {
			rows[i].TokenBits = make([]TokenBits, len(seqs[i]))
			prev := -1
			for k, id := range seqs[i] {
				rows[i].TokenBits[k] = TokenBits{Text: v.TokenText(prev, id), Bits: -dst[i][k] / math.Ln2}
				prev = id
			}
		}
	}
	return rows, nil
}

func (s *Server) scoreLines(w http.ResponseWriter, r *http.Request) {
	rc := http.NewResponseController(w)
	// Rows go out while lines still come in.
	_ = rc.EnableFullDuplex()
	in := bufio.NewReaderSize(r.Body, 64<<10)
	wroteHeader := false
	enc := json.NewEncoder(w)
	enc.SetEscapeHTML(false)
	fail := func(err error, n int) {
		if !wroteHeader {
			var re *requestError
			if errors.As(err, &re) {
				re.msg = fmt.Sprintf("input line %d: %s", n, re.msg)
			}
			answerError(w, err)
			return
		}
		_ = rc.SetWriteDeadline(s.now().Add(s.lim.WriteTimeout))
		enc.Encode(errorBody{Error: oneLine(fmt.Sprintf("input line %d: %v", n, err))})
	}
	for n := 1; ; n++ {
		_ = rc.SetReadDeadline(s.now().Add(s.lim.ReadTimeout))
		b, err := readLine(in, s.lim.MaxBodyBytes)
		if err == io.EOF {
			if n == 1 {
				fail(badRequest("no lines: send one JSON object per line"), n)
			}
			return
		}
		if err != nil {
			fail(err, n)
			return
		}
		if len(bytes.TrimSpace(b)) == 0 {
			continue
		}
		if !utf8.Valid(b) {
			fail(badRequest("not valid UTF-8"), n)
			return
		}
		var req rawLineRequest
		if err := decodeStrict(b, &req); err != nil {
			fail(err, n)
			return
		}
		so, err := decodeStream(req.Stream)
		if err != nil {
			fail(err, n)
			return
		}
		if req.Line == nil {
			fail(badRequest("no \"line\" to score"), n)
			return
		}
		if err := s.checkLine(1, *req.Line); err != nil {
			fail(err, n)
			return
		}
		sv := s.cur.Load()
		rows, err := s.scoreLines1(r.Context(), sv, []string{*req.Line}, so, req.PerToken)
		if err != nil {
			fail(err, n)
			return
		}
		if !wroteHeader {
			w.Header().Set("Content-Type", "application/x-ndjson")
			w.WriteHeader(http.StatusOK)
			wroteHeader = true
		}
		if so == nil {
			rows[0].Line = n
		}
		_ = rc.SetWriteDeadline(s.now().Add(s.lim.WriteTimeout))
		if err := enc.Encode(rows[0]); err != nil {
			return
		}
		if err := rc.Flush(); err != nil {
			return
		}
	}
}

// readLine reads one line of at most max bytes (its end not included).
func readLine(r *bufio.Reader, max int64) ([]byte, error) {
	var line []byte
	for {
		frag, err := r.ReadSlice('\n')
		line = append(line, frag...)
		if int64(len(line)) > max+1 {
			return nil, tooLarge("over the limit of %d bytes per input line (max_body_bytes)", max)
		}
		if err == bufio.ErrBufferFull {
			continue
		}
		if err == io.EOF && len(line) > 0 {
			return line, nil
		}
		if err != nil {
			return nil, err
		}
		return bytes.TrimSuffix(line, []byte("\n")), nil
	}
}

func (s *Server) sample(w http.ResponseWriter, r *http.Request) {
	b, err := s.readBody(w, r)
	if err != nil {
		answerError(w, err)
		return
	}
	var req SampleRequest
	if err := decodeStrict(b, &req); err != nil {
		answerError(w, err)
		return
	}
	sv := s.cur.Load()
	o, err := s.sampleOptions(&req)
	if err != nil {
		answerError(w, err)
		return
	}
	prompt, err := sv.m.Vocab.EncodeKnown(r.Context(), req.Prompt, "prompt", req.MapUnknown)
	if err != nil {
		var ue *data.UnknownPiecesError
		if errors.As(err, &ue) {
			err = badRequest("%v (set map_unknown to read them as %s)", err, data.UnknownPiece)
		}
		answerError(w, err)
		return
	}
	resp := SampleResponse{Model: sv.facts.ModelRef, Generated: true, Notice: GeneratedNotice, Seed: o.Seed, Samples: []Sample{}}
	err = generate.Continue(r.Context(), sv.m, prompt, o, nil, func(i int, c generate.Continuation) error {
		resp.Samples = append(resp.Samples, NewSample(i, c))
		return nil
	})
	if err != nil {
		answerError(w, err)
		return
	}
	_ = http.NewResponseController(w).SetWriteDeadline(s.now().Add(s.lim.WriteTimeout))
	writeJSON(w, http.StatusOK, resp)
}

// SampleOptions turns a request into the options of generate.Continue,
// with a seed drawn from the clock when the request has none.
func (s *Server) sampleOptions(req *SampleRequest) (generate.Options, error) {
	length := req.Length
	if length == "" {
		length = "200"
	}
	l, err := generate.ParseLength(length)
	if err != nil {
		return generate.Options{}, badRequest("length: %v", err)
	}
	if l.MaxTokens() > s.lim.MaxSampleTokens {
		return generate.Options{}, tooLarge("length %s is up to %d tokens, over the limit of %d (max_sample_tokens)", length, l.MaxTokens(), s.lim.MaxSampleTokens)
	}
	n := req.Samples
	if n == 0 {
		n = 1
	}
	if n > s.lim.MaxSamples {
		return generate.Options{}, tooLarge("%d samples, over the limit of %d (max_samples)", n, s.lim.MaxSamples)
	}
	sc := rnn.DefaultSampling()
	if req.Temperature != nil {
		sc.Temperature = *req.Temperature
	}
	sc.TopK, sc.TopP = req.TopK, req.TopP
	var seed uint64
	if req.Seed != nil {
		seed = *req.Seed
	} else {
		seed = rand.New(rand.NewPCG(uint64(s.now().UnixNano()), generate.PCGStream)).Uint64()
	}
	o := generate.Options{Length: l, Samples: n, Sampling: sc, Seed: seed, Beam: req.Beam, Stop: req.Stop}
	if err := o.Validate(); err != nil {
		return o, badRequest("%v", err)
	}
	return o, nil
}

// NewSample is a continuation as the service answers it.
func NewSample(i int, c generate.Continuation) Sample {
	sm := Sample{Sample: i, Text: c.Text, Stop: c.Stop, Characters: utf8.RuneCountInString(c.Text), LogProb: c.LogProb,
		Bits: -c.LogProb / math.Ln2, Tokens: make([]SampleToken, len(c.Tokens))}
	for k, tk := range c.Tokens {
		sm.Tokens[k] = SampleToken{ID: tk.ID, Text: tk.Text, LogProb: tk.LogProb, Bits: -tk.LogProb / math.Ln2}
	}
	return sm
}

// ---- carried streams ----

// streams keeps up to max carried streams, least recently used first out.
type streams struct {
	mu    sync.Mutex
	max   int
	order *list.List // of *stream, most recently used at the front
	byKey map[string]*list.Element
}

type stream struct {
	name  string
	mu    sync.Mutex // held while a request scores the stream's lines
	carry *rnn.Carry[float32]
	gen   int
	lines int
}

func newStreams(max int) *streams {
	return &streams{max: max, order: list.New(), byKey: map[string]*list.Element{}}
}

// get returns the stream of that name, locked, made at the front; it
// drops the least recently used stream past max.
func (c *streams) get(name string) *stream {
	c.mu.Lock()
	var st *stream
	if e, ok := c.byKey[name]; ok {
		c.order.MoveToFront(e)
		st = e.Value.(*stream)
	} else {
		st = &stream{name: name}
		c.byKey[name] = c.order.PushFront(st)
		for c.order.Len() > c.max {
			old := c.order.Back()
			c.order.Remove(old)
			delete(c.byKey, old.Value.(*stream).name)
		}
	}
	c.mu.Unlock()
	st.mu.Lock()
	return st
}

func (c *streams) len() int {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.order.Len()
}

// ---- batching ----

// job is one request's lines waiting for a worker.
type job struct {
	ctx   context.Context
	sv    *served
	dst   [][]float64
	seqs  [][]int
	carry []*rnn.Carry[float32]
	done  chan error
}

// run scores seqs with sv through the workers, which may batch them with
// other requests' lines.
func (s *Server) run(ctx context.Context, sv *served, dst [][]float64, seqs [][]int, carry []*rnn.Carry[float32]) error {
	j := &job{ctx: ctx, sv: sv, dst: dst, seqs: seqs, carry: carry, done: make(chan error, 1)}
	select {
	case s.jobs <- j:
	case <-ctx.Done():
		return ctx.Err()
	case <-s.closed:
		return errors.New("the service is closed")
	}
	// A worker always answers (a cancelled job too), so the carries are
	// never written after run returns, unless the service closes.
	select {
	case err := <-j.done:
		return err
	case <-s.closed:
		return errors.New("the service is closed")
	}
}

// worker takes a job, gathers what else is waiting (up to
// rnn.BatchStreams lines, within BatchWait), and scores each model's lines
// as one batch.
func (s *Server) worker() {
	defer s.wg.Done()
	scorers := map[*rnn.Model[float32]]*rnn.BatchScorer[float32]{}
	var timer *time.Timer
	for {
		var first *job
		select {
		case first = <-s.jobs:
		case <-s.closed:
			for {
				select {
				case j := <-s.jobs:
					j.done <- errors.New("the service is closed")
				default:
					return
				}
			}
		}
		batch := []*job{first}
		lines := len(first.seqs)
		if s.lim.BatchWait > 0 && lines < rnn.BatchStreams {
			if timer == nil {
				timer = time.NewTimer(s.lim.BatchWait)
			} else {
				timer.Reset(s.lim.BatchWait)
			}
		gather:
			for lines < rnn.BatchStreams {
				select {
				case j := <-s.jobs:
					batch = append(batch, j)
					lines += len(j.seqs)
				case <-timer.C:
					break gather
				}
			}
			if !timer.Stop() {
				select {
				case <-timer.C:
				default:
				}
			}
		}
		// One call per model (a reload may leave two).
		for len(batch) > 0 {
			sv := batch[0].sv
			var mine, rest []*job
			for _, j := range batch {
				if j.sv == sv {
					if err := j.ctx.Err(); err != nil {
						j.done <- err
						continue
					}
					mine = append(mine, j)
				} else {
					rest = append(rest, j)
				}
			}
			batch = rest
			if len(mine) == 0 {
				continue
			}
			var dst [][]float64
			var seqs [][]int
			var carry []*rnn.Carry[float32]
			for _, j := range mine {
				dst = append(dst, j.dst...)
				seqs = append(seqs, j.seqs...)
				if j.carry != nil {
					carry = append(carry, j.carry...)
				} else {
					carry = append(carry, make([]*rnn.Carry[float32], len(j.seqs))...)
				}
			}
			bs := scorers[sv.m.Net]
			if bs == nil {
				if len(scorers) > 1 {
					clear(scorers) // models of earlier reloads
				}
				bs = sv.m.Net.NewBatchScorer(rnn.BatchStreams)
				scorers[sv.m.Net] = bs
			}
			err := bs.LogProbs(context.Background(), dst, seqs, carry)
			for _, j := range mine {
				j.done <- err
			}
		}
	}
}
