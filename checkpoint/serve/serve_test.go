package serve

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"net"
	"net/http"
	"net/http/httptest"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/checkpoint/generate"
	"weft/checkpoint/modeltest"
	"weft/eval/surprise"
	"weft/rnn"
)

// corpus is the invented text the test vocabulary is learned from.
const corpus = "the gate opened at nine.\nthe pump at dock two ran dry.\na crane lifted the crate.\n"

// testModel is the seeded test model over corpus, with its output bias
// shifted by shift so that two models give different numbers.
func testModel(t testing.TB, shift float32) *checkpoint.Model {
	m := modeltest.New(t, corpus, "char", "line")
	for _, p := range m.Net.Params() {
		if p.Name == "output.bias" {
			for i := range p.Value {
				p.Value[i] += shift * float32(i%3)
			}
		}
	}
	return m
}

// saveModel writes m to path as a training checkpoint whose progress
// records a best validation of bpc bits per character at step 40.
func saveModel(t testing.TB, m *checkpoint.Model, path string, bpc float64) {
	t.Helper()
	if err := writeModel(m, path, bpc); err != nil {
		t.Fatal(err)
	}
}

func writeModel(m *checkpoint.Model, path string, bpc float64) error {
	tr, err := rnn.NewTrainer(m.Net, rnn.DefaultTrainConfig(), nil)
	if err != nil {
		return err
	}
	f, err := checkpoint.NewTrainingFile(tr, m.Vocab, nil, checkpoint.Progress{HaveBest: true, BestBitsPerChar: bpc, BestStep: 40})
	if err != nil {
		return err
	}
	return checkpoint.Save(path, f)
}

// start serves the checkpoint at path on a loopback test server.
func start(t testing.TB, path string, lim Limits) (*Server, *Client) {
	t.Helper()
	s, err := New(FileLoader(path), lim)
	if err != nil {
		t.Fatal(err)
	}
	ts := httptest.NewServer(s.Handler()) // listens on 127.0.0.1 only
	t.Cleanup(func() {
		ts.Close()
		s.Close()
	})
	return s, &Client{Base: ts.URL, HTTP: ts.Client()}
}

func fixture(t testing.TB) (string, *checkpoint.Model) {
	m := testModel(t, 0)
	path := filepath.Join(t.TempDir(), "model.ckpt")
	saveModel(t, m, path, 2.5)
	return path, m
}

// weftScore scores text as 'weft score' does (its engine, with its
// default longest piece), naming the rows source.
func weftScore(t testing.TB, m *checkpoint.Model, text, source string, context int) []surprise.Row {
	t.Helper()
	var rows []surprise.Row
	sc, err := surprise.New(m.Net, "rnn", m.Vocab, surprise.Options{Unit: surprise.Line, MaxChars: 64 << 10, Context: context},
		func(r surprise.Row) error { rows = append(rows, r); return nil })
	if err != nil {
		t.Fatal(err)
	}
	if _, err := sc.Score(t.Context(), strings.NewReader(text), source); err != nil {
		t.Fatal(err)
	}
	if err := sc.Flush(); err != nil {
		t.Fatal(err)
	}
	return rows
}

// rowsOf strips the service's extra fields (and the scoring order, which
// the engine keeps out of JSON).
func rowsOf(ls []ScoredLine) []surprise.Row {
	out := make([]surprise.Row, len(ls))
	for i, l := range ls {
		out[i] = l.Row
		out[i].Seq = i
	}
	return out
}

// lines has an unknown character (#), a word the corpus lacks, an empty
// line and a long one.
var lines = []string{"the gate opened at nine.", "a crane ran dry at dock #2", "", "the pump lifted the crate at the gate at nine and the crane ran dry."}

// TestScoreMatchesWeftScore: each line the service scores has the row
// 'weft score' gives it in a file of those lines (every field, every bit).
func TestScoreMatchesWeftScore(t *testing.T) {
	path, m := fixture(t)
	_, c := start(t, path, Limits{})
	want := weftScore(t, m, strings.Join(lines, "\n")+"\n", "request", 0)
	got, err := c.Score(t.Context(), ScoreRequest{Lines: lines, PerToken: true})
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(rowsOf(got.Rows), want) {
		t.Fatalf("got %+v\nwant %+v", rowsOf(got.Rows), want)
	}
	if want[1].UnknownTokens != 2 { // '#' and '2' are outside the corpus
		t.Errorf("unknown tokens %d, want 2", want[1].UnknownTokens)
	}
	// Per-token bits are −log2 of LogProbs of the line alone and add up to
	// the row's bits.
	for i, r := range got.Rows {
		seq := m.Vocab.Encode(nil, lines[i]+"\n")
		lp := make([]float64, len(seq))
		if err := m.Net.LogProbs(t.Context(), lp, seq); err != nil {
			t.Fatal(err)
		}
		var sum float64
		for k, tb := range r.TokenBits {
			if tb.Bits != -lp[k]/math.Ln2 {
				t.Fatalf("line %d token %d: %v bits, want %v", i, k, tb.Bits, -lp[k]/math.Ln2)
			}
			sum += tb.Bits
		}
		if len(r.TokenBits) != len(seq) || math.Abs(sum-r.Bits) > 1e-9*r.Bits || !r.StreamStart {
			t.Errorf("line %d: %d tokens (want %d) summing to %v bits, row %v", i, len(r.TokenBits), len(seq), sum, r.Bits)
		}
	}
	if got.Model.Generation != 1 || got.Model.Name != m.Net.Name() {
		t.Errorf("model %+v", got.Model)
	}
}

// TestStreamMatchesContext: lines scored under a stream name, over several
// requests, have the rows of 'weft score --context N' on the stream's lines
// concatenated with N covering them; so do lines sent one per NDJSON line.
// A reset starts afresh.
func TestStreamMatchesContext(t *testing.T) {
	path, m := fixture(t)
	_, c := start(t, path, Limits{})
	ctx := t.Context()
	all := append(append([]string{}, lines...), "the gate.", "nine.")
	want := weftScore(t, m, strings.Join(all, "\n")+"\n", "dock-log", 1<<20)
	var got []ScoredLine
	for _, part := range [][]string{all[:1], all[1:4], all[4:]} {
		r, err := c.Score(ctx, ScoreRequest{Lines: part, Stream: &StreamOptions{Name: "dock-log"}})
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, r.Rows...)
	}
	if !reflect.DeepEqual(rowsOf(got), want) {
		t.Fatalf("carried:\ngot %+v\nwant %+v", rowsOf(got), want)
	}
	if !got[0].StreamStart || got[1].StreamStart {
		t.Errorf("stream_start %v %v, want true false", got[0].StreamStart, got[1].StreamStart)
	}
	// The same lines as NDJSON, under another name.
	var reqs []LineRequest
	for _, l := range all {
		reqs = append(reqs, LineRequest{Line: l, Stream: &StreamOptions{Name: "dock-log-2"}})
	}
	got = got[:0]
	if err := c.ScoreStream(ctx, reqs, func(r ScoredLine) error { got = append(got, r); return nil }); err != nil {
		t.Fatal(err)
	}
	for i := range want {
		want[i].Source = "dock-log-2"
	}
	if !reflect.DeepEqual(rowsOf(got), want) {
		t.Fatalf("NDJSON:\ngot %+v\nwant %+v", rowsOf(got), want)
	}
	// A reset scores the next line as from a fresh state: the row of
	// 'weft score' without context.
	r, err := c.Score(ctx, ScoreRequest{Lines: all[1:2], Stream: &StreamOptions{Name: "dock-log", Reset: true}})
	if err != nil {
		t.Fatal(err)
	}
	fresh := weftScore(t, m, all[1]+"\n", "dock-log", 0)
	if !r.Rows[0].StreamStart || r.Rows[0].Bits != fresh[0].Bits || r.Rows[0].Line != 1 {
		t.Errorf("after reset: got %+v, want %v bits at line 1", r.Rows[0], fresh[0].Bits)
	}
}

// TestStreamsDropped: past MaxStreams the least recently used stream is
// dropped and starts afresh.
func TestStreamsDropped(t *testing.T) {
	path, _ := fixture(t)
	_, c := start(t, path, Limits{MaxStreams: 2})
	ctx := t.Context()
	score := func(name string) ScoredLine {
		t.Helper()
		r, err := c.ScoreLine(ctx, "the gate.", name)
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	score("a")
	score("b")
	score("a") // b is now the least recently used
	score("c") // drops b
	if r := score("a"); r.StreamStart || r.Line != 3 {
		t.Errorf("stream a: got start %v line %d, want false 3", r.StreamStart, r.Line)
	}
	if r := score("b"); !r.StreamStart || r.Line != 1 {
		t.Errorf("stream b: got start %v line %d, want true 1 (dropped)", r.StreamStart, r.Line)
	}
	if h, err := c.Health(ctx); err != nil || h.Streams != 2 || h.Status != "ok" {
		t.Errorf("health %+v, %v; want 2 streams", h, err)
	}
}

// TestSampleMatchesGenerate: the service's samples are generate.Continue's
// ('weft sample”s engine) for the same seed and options.
func TestSampleMatchesGenerate(t *testing.T) {
	path, m := fixture(t)
	_, c := start(t, path, Limits{})
	temp := 0.8
	for _, req := range []SampleRequest{
		{Prompt: "the ", Length: "40", Samples: 3, Seed: ptr(uint64(7)), Temperature: &temp, TopK: 5, Stop: []string{"."}},
		{Prompt: "a crane", Length: "30c", Seed: ptr(uint64(11)), TopP: 0.9},
		{Prompt: "", Length: "12", Samples: 2, Beam: 3},
	} {
		got, err := c.Sample(t.Context(), req)
		if err != nil {
			t.Fatal(err)
		}
		l, _ := generate.ParseLength(req.Length)
		sc := rnn.DefaultSampling()
		if req.Temperature != nil {
			sc.Temperature = *req.Temperature
		}
		sc.TopK, sc.TopP = req.TopK, req.TopP
		n := max(req.Samples, 1)
		o := generate.Options{Length: l, Samples: n, Sampling: sc, Seed: got.Seed, Beam: req.Beam, Stop: req.Stop}
		prompt := m.Vocab.Encode(nil, req.Prompt)
		var want []Sample
		if err := generate.Continue(t.Context(), m, prompt, o, nil, func(i int, c generate.Continuation) error {
			want = append(want, NewSample(i, c))
			return nil
		}); err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(got.Samples, want) || len(want) != n {
			t.Errorf("%+v:\ngot %+v\nwant %+v", req, got.Samples, want)
		}
		if !got.Generated || got.Notice != GeneratedNotice || (req.Seed != nil && got.Seed != *req.Seed) {
			t.Errorf("labels: generated %v, notice %q, seed %d", got.Generated, got.Notice, got.Seed)
		}
	}
}

func ptr[T any](v T) *T { return &v }

// TestBadInput: each bad request is a 4xx with a one-line reason naming
// the problem, and the service keeps serving.
func TestBadInput(t *testing.T) {
	path, _ := fixture(t)
	_, c := start(t, path, Limits{MaxBodyBytes: 2000, MaxLineChars: 100, MaxBatchLines: 3, MaxSampleTokens: 50})
	long := strings.Repeat("a", 101)
	tests := []struct {
		name, method, path, body string
		code                     int
		reason                   string
	}{
		{"malformed JSON", "POST", "/v1/score", `{"lines": ["a"`, 400, "malformed JSON"},
		{"not an object", "POST", "/v1/score", `["a"]`, 400, "want a JSON object"},
		{"invalid UTF-8", "POST", "/v1/score", "{\"lines\": [\"a\xff\"]}", 400, "not valid UTF-8"},
		{"oversized body", "POST", "/v1/score", `{"lines": ["` + strings.Repeat("a", 2000) + `"]}`, 413, "max_body_bytes"},
		{"over-long line", "POST", "/v1/score", `{"lines": ["` + long + `"]}`, 413, "max_line_chars"},
		{"too many lines", "POST", "/v1/score", `{"lines": ["a","b","c","d"]}`, 413, "max_batch_lines"},
		{"unknown field", "POST", "/v1/score", `{"lines": ["a"], "colour": 1}`, 400, `unknown field "colour"`},
		{"unknown stream option", "POST", "/v1/score", `{"lines": ["a"], "stream": {"name": "x", "rewind": true}}`, 400, `unknown stream option "rewind"`},
		{"stream without name", "POST", "/v1/score", `{"lines": ["a"], "stream": {}}`, 400, "stream name"},
		{"line end in a line", "POST", "/v1/score", `{"lines": ["a\nb"]}`, 400, "line end"},
		{"no lines", "POST", "/v1/score", `{}`, 400, "no lines"},
		{"wrong type", "POST", "/v1/score", `{"lines": "a"}`, 400, `field "lines"`},
		{"two values", "POST", "/v1/score", `{"lines": ["a"]} {}`, 400, "more than one"},
		{"sample too long", "POST", "/v1/sample", `{"prompt": "a", "length": "51"}`, 413, "max_sample_tokens"},
		{"sample bad length", "POST", "/v1/sample", `{"prompt": "a", "length": "ten"}`, 400, "length"},
		{"sample unknown prompt", "POST", "/v1/sample", `{"prompt": "#", "length": "10"}`, 400, "map_unknown"},
		{"sample bad temperature", "POST", "/v1/sample", `{"prompt": "a", "length": "10", "temperature": -1}`, 400, "temperature"},
		{"NDJSON first line bad", "POST", "/v1/score/lines", `{"line": "a", "x": 1}` + "\n", 400, `input line 1: unknown field "x"`},
		{"NDJSON over-long line", "POST", "/v1/score/lines", `{"line": "` + long + `"}` + "\n", 413, "max_line_chars"},
		{"wrong method", "GET", "/v1/score", "", 405, "does not take GET"},
		{"unknown path", "GET", "/v2/score", "", 404, "no endpoint"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			req, err := http.NewRequestWithContext(t.Context(), tc.method, c.Base+tc.path, strings.NewReader(tc.body))
			if err != nil {
				t.Fatal(err)
			}
			resp, err := c.HTTP.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			err = decodeAnswer(resp, &struct{}{})
			resp.Body.Close()
			var ae *APIError
			if !errors.As(err, &ae) || ae.Status != tc.code || !strings.Contains(ae.Message, tc.reason) || strings.Contains(ae.Message, "\n") {
				t.Errorf("got %v, want %d with %q", err, tc.code, tc.reason)
			}
			if _, err := c.ScoreLine(t.Context(), "the gate.", ""); err != nil {
				t.Errorf("after the bad request: %v", err)
			}
		})
	}
	// A bad NDJSON line after good ones ends the answer with an error row.
	var n int
	err := c.ScoreStream(t.Context(), []LineRequest{{Line: "the gate."}, {Line: long}}, func(ScoredLine) error { n++; return nil })
	var ae *APIError
	if !errors.As(err, &ae) || !strings.Contains(ae.Message, "input line 2") || !strings.Contains(ae.Message, "max_line_chars") || n != 1 {
		t.Errorf("NDJSON second line over the cap: %d rows, %v", n, err)
	}
}

// TestReload: a newer checkpoint is served after a reload (and streams
// start afresh); a damaged one is refused and the old model keeps serving.
func TestReload(t *testing.T) {
	path, m := fixture(t)
	_, c := start(t, path, Limits{})
	ctx := t.Context()
	f, err := c.Model(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if f.Generation != 1 || f.Cell != "lstm" || f.HiddenSize != 24 || f.VocabSize != m.Vocab.Len() || f.Tokenizer != "char" ||
		f.ValidationBitsPerChar == nil || *f.ValidationBitsPerChar != 2.5 || f.Path != path {
		t.Fatalf("facts %+v", f)
	}
	before, _ := c.ScoreLine(ctx, "the gate.", "s")
	m2 := testModel(t, 0.5)
	saveModel(t, m2, path, 2.25)
	f, err = c.Reload(ctx)
	if err != nil || f.Generation != 2 || *f.ValidationBitsPerChar != 2.25 {
		t.Fatalf("reload: %+v, %v", f, err)
	}
	after, _ := c.ScoreLine(ctx, "the gate.", "s")
	want := weftScore(t, m2, "the gate.\n", "s", 0)
	if after.Bits != want[0].Bits || after.Bits == before.Bits || !after.StreamStart {
		t.Errorf("after reload: %v bits (start %v), want %v (before %v)", after.Bits, after.StreamStart, want[0].Bits, before.Bits)
	}
	// Damage the file: one flipped byte in the middle.
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	b[len(b)/2] ^= 0x40
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = c.Reload(ctx)
	var ae *APIError
	if !errors.As(err, &ae) || ae.Status != 500 || !strings.Contains(ae.Message, "reload refused, still serving") {
		t.Fatalf("damaged reload: got %v", err)
	}
	again, err := c.ScoreLine(ctx, "the gate.", "")
	if err != nil || again.Bits != want[0].Bits {
		t.Errorf("after the refused reload: %v bits, %v; want %v", again.Bits, err, want[0].Bits)
	}
	if f, _ := c.Model(ctx); f.Generation != 2 {
		t.Errorf("generation %d after a refused reload, want 2", f.Generation)
	}
}

// TestDrain: when Serve's context ends, a request in flight finishes and
// Serve returns; new requests are not accepted.
func TestDrain(t *testing.T) {
	path, _ := fixture(t)
	s, err := New(FileLoader(path), Limits{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	ln, err := listenLoopback(t)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(t.Context())
	served := make(chan error, 1)
	go func() { served <- s.Serve(ctx, ln) }()
	c := NewClient("http://" + ln.Addr().String())
	// An NDJSON request whose body stays open across the cancel.
	pr, pw := ioPipe()
	req, _ := http.NewRequestWithContext(t.Context(), "POST", c.Base+"/v1/score/lines", pr)
	respc := make(chan *http.Response, 1)
	go func() {
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Error(err)
		}
		respc <- resp
	}()
	pw.Write([]byte(`{"line": "the gate."}` + "\n"))
	resp := <-respc
	if resp == nil {
		t.FailNow()
	}
	defer resp.Body.Close()
	cancel()
	time.Sleep(50 * time.Millisecond)
	pw.Write([]byte(`{"line": "nine."}` + "\n"))
	pw.Close()
	var out bytes.Buffer
	out.ReadFrom(resp.Body)
	if n := strings.Count(out.String(), "\n"); n != 2 || strings.Contains(out.String(), "error") {
		t.Errorf("request in flight got %q, want 2 rows", out.String())
	}
	select {
	case err := <-served:
		if err != nil {
			t.Errorf("Serve: %v", err)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("Serve did not return after the drain")
	}
	if _, err := c.Health(t.Context()); err == nil {
		t.Error("a request after the drain was answered")
	}
}

// TestSlowClient: a client that stops sending its body holds up neither
// the other requests nor, past the read deadline, its own connection.
func TestSlowClient(t *testing.T) {
	path, _ := fixture(t)
	_, c := start(t, path, Limits{ReadTimeout: 300 * time.Millisecond})
	addr := strings.TrimPrefix(c.Base, "http://")
	conn, err := net.Dial("tcp", addr) // loopback: the test server's address
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	fmt.Fprintf(conn, "POST /v1/score HTTP/1.1\r\nHost: %s\r\nContent-Type: application/json\r\nContent-Length: 100\r\n\r\n{\"lines\": [", addr)
	if _, err := c.ScoreLine(t.Context(), "the gate.", ""); err != nil {
		t.Fatalf("another request while one stalls: %v", err)
	}
	// The stalled request is answered (or its connection closed) once
	// the read deadline passes, not left open.
	conn.SetReadDeadline(time.Now().Add(20 * time.Second))
	b, err := io.ReadAll(conn)
	var ne net.Error
	if errors.As(err, &ne) && ne.Timeout() {
		t.Fatalf("the stalled request's connection is still open after 20 s (read deadline %v)", 300*time.Millisecond)
	}
	if len(b) > 0 && !strings.Contains(string(b), " 400 ") {
		t.Errorf("stalled request: got %q, want a 400 answer or a closed connection", b)
	}
}
