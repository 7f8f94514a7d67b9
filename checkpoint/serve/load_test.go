package serve

import (
	"bytes"
	"context"
	"fmt"
	"net/http"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"weft/checkpoint"
	"weft/data"
	"weft/data/demo"
	"weft/rnn"
)

// heapNow is the live heap after a full collection.
func heapNow() uint64 {
	runtime.GC()
	runtime.GC()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	return ms.HeapAlloc
}

// TestLoad is the bounded load test: loadClients clients on loopback send
// loadRequests requests each (plain lines, stream lines, NDJSON, samples),
// and a reload to a newer checkpoint happens half-way. Every request must
// succeed with the numbers of one of the two models; afterwards the
// goroutines and the live heap must be back near where they started.
func TestLoad(t *testing.T) {
	const loadClients, loadRequests = 16, 40
	path, m := fixture(t)
	m2 := testModel(t, 0.5)
	line := "the gate opened at nine."
	wantA := weftScore(t, m, line+"\n", "request", 0)[0].Bits
	wantB := weftScore(t, m2, line+"\n", "request", 0)[0].Bits

	goroutines0, heap0 := runtime.NumGoroutine(), heapNow()
	s, err := New(FileLoader(path), Limits{})
	if err != nil {
		t.Fatal(err)
	}
	ln, err := listenLoopback(t)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(context.Background())
	served := make(chan error, 1)
	go func() { served <- s.Serve(ctx, ln) }()
	tr := &http.Transport{MaxIdleConnsPerHost: loadClients}
	c := &Client{Base: "http://" + ln.Addr().String(), HTTP: &http.Client{Transport: tr, Timeout: 30 * time.Second}}

	var done, failures, onA, onB atomic.Int64
	var firstErr atomic.Value
	fail := func(err error) {
		failures.Add(1)
		firstErr.CompareAndSwap(nil, err)
	}
	reloaded := make(chan error, 1)
	var reloadOnce sync.Once
	start := time.Now()
	var wg sync.WaitGroup
	var peakGoroutines atomic.Int64
	for k := 0; k < loadClients; k++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			rctx := context.Background()
			for i := 0; i < loadRequests; i++ {
				switch i % 4 {
				case 0:
					r, err := c.Score(rctx, ScoreRequest{Lines: []string{line, "a crane ran dry.", line}})
					if err != nil {
						fail(err)
					} else if b := r.Rows[0].Bits; len(r.Rows) != 3 || (b != wantA && b != wantB) || r.Rows[2].Bits != b {
						fail(fmt.Errorf("client %d request %d: %v bits, want %v or %v", k, i, b, wantA, wantB))
					} else if b == wantA {
						onA.Add(1)
					} else {
						onB.Add(1)
					}
				case 1:
					if _, err := c.ScoreLine(rctx, line, fmt.Sprintf("client-%d", k)); err != nil {
						fail(err)
					}
				case 2:
					n := 0
					reqs := []LineRequest{{Line: line, Stream: &StreamOptions{Name: fmt.Sprintf("nd-%d", k)}}, {Line: "nine."}, {Line: "the pump."}}
					if err := c.ScoreStream(rctx, reqs, func(ScoredLine) error { n++; return nil }); err != nil || n != 3 {
						fail(fmt.Errorf("NDJSON: %d rows, %v", n, err))
					}
				case 3:
					r, err := c.Sample(rctx, SampleRequest{Prompt: "the ", Length: "20", Seed: ptr(uint64(i))})
					if err != nil || len(r.Samples) != 1 {
						fail(fmt.Errorf("sample: %v", err))
					}
				}
				if g := int64(runtime.NumGoroutine()); g > peakGoroutines.Load() {
					peakGoroutines.Store(g)
				}
				if done.Add(1) == loadClients*loadRequests/2 {
					// This client reloads while the others keep sending.
					reloadOnce.Do(func() {
						err := writeModel(m2, path, 2.25)
						if err == nil {
							_, err = c.Reload(rctx)
						}
						reloaded <- err
					})
				}
			}
		}()
	}
	wg.Wait()
	elapsed := time.Since(start)
	if onA.Load() == 0 || onB.Load() == 0 {
		t.Errorf("plain scores: %d by the first model, %d by the reloaded one; want both", onA.Load(), onB.Load())
	}
	if err := <-reloaded; err != nil {
		t.Errorf("reload during the load: %v", err)
	}
	if f, err := c.Model(context.Background()); err != nil || f.Generation != 2 {
		t.Errorf("after the load: generation %d, %v; want 2", f.Generation, err)
	}
	// The clients close their idle connections first: a connection that
	// never carried a request counts as busy for 5 s of a drain
	// (net/http's rule).
	tr.CloseIdleConnections()
	cancel()
	if err := <-served; err != nil {
		t.Errorf("drain: %v", err)
	}
	s.Close()

	// Goroutines: the service's and the connections' are gone (polled,
	// since closed connections end asynchronously).
	goroutines1 := runtime.NumGoroutine()
	for i := 0; i < 100 && goroutines1 > goroutines0; i++ {
		time.Sleep(20 * time.Millisecond)
		goroutines1 = runtime.NumGoroutine()
	}
	heap1 := heapNow()
	total := loadClients * loadRequests
	t.Logf("load: %d requests from %d clients in %v (%.0f requests/s), %d failed; reload half-way (plain scores: %d by the first model, %d by the reloaded one); goroutines %d before, peak %d, %d after; live heap %.2f MiB before, %.2f MiB after",
		total, loadClients, elapsed.Round(time.Millisecond), float64(total)/elapsed.Seconds(), failures.Load(), onA.Load(), onB.Load(),
		goroutines0, peakGoroutines.Load(), goroutines1, float64(heap0)/(1<<20), float64(heap1)/(1<<20))
	if n := failures.Load(); n > 0 {
		t.Errorf("%d of %d requests failed; first: %v", n, total, firstErr.Load())
	}
	if goroutines1 > goroutines0 {
		t.Errorf("goroutines: %d before the service, %d after it closed", goroutines0, goroutines1)
	}
	// "Near": the two models, a few streams and the kernels' cached
	// workspaces are allowed; a leak of per-request state is not.
	const heapSlack = 8 << 20
	if heap1 > heap0+heapSlack {
		t.Errorf("live heap %d bytes after the load, %d before: more than %d above", heap1, heap0, heapSlack)
	}
}

// demoModel is a model the size of the demo's ('weft demo': a character
// LSTM of 1×256 with embedding 32, over the vocabulary of the Port Averly
// dispatch log), untrained (speed does not depend on the weights), with
// lines of that log.
func demoModel(b *testing.B) (string, []string) {
	var buf bytes.Buffer
	if _, err := demo.Generate(&buf, 1, 200_000); err != nil {
		b.Fatal(err)
	}
	text := buf.String()
	v, err := data.LearnVocab(context.Background(), strings.NewReader(text), "demo", data.VocabOptions{Tokenizer: "char", Boundary: "line"})
	if err != nil {
		b.Fatal(err)
	}
	cfg := rnn.DefaultConfig()
	cfg.Cell, cfg.Layers, cfg.HiddenSize, cfg.EmbeddingSize = "lstm", 1, 256, 32
	net, err := rnn.NewModel[float32](cfg, v.Len(), 1)
	if err != nil {
		b.Fatal(err)
	}
	f, err := checkpoint.NewModelFile(net, net.Config(), v, nil)
	if err != nil {
		b.Fatal(err)
	}
	path := filepath.Join(b.TempDir(), "demo.ckpt")
	if err := checkpoint.Save(path, f); err != nil {
		b.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(text), "\n")
	return path, lines[:min(len(lines), 2000)]
}

// BenchmarkServe measures the service on loopback with the demo-sized
// model: each request scores one line of the dispatch log (no stream), from
// 1, 8 and 64 concurrent clients; it reports lines per second and the
// latency percentiles of the requests.
func BenchmarkServe(b *testing.B) {
	path, lines := demoModel(b)
	for _, clients := range []int{1, 8, 64} {
		b.Run(fmt.Sprintf("demo-lstm-1x256/clients=%d", clients), func(b *testing.B) {
			s, err := New(FileLoader(path), Limits{})
			if err != nil {
				b.Fatal(err)
			}
			defer s.Close()
			ln, err := listenLoopback(b)
			if err != nil {
				b.Fatal(err)
			}
			ctx, cancel := context.WithCancel(context.Background())
			served := make(chan error, 1)
			go func() { served <- s.Serve(ctx, ln) }()
			defer func() { cancel(); <-served }()
			tr := &http.Transport{MaxIdleConnsPerHost: clients}
			defer tr.CloseIdleConnections()
			c := &Client{Base: "http://" + ln.Addr().String(), HTTP: &http.Client{Transport: tr}}
			var next atomic.Int64
			lat := make([][]time.Duration, clients)
			var wg sync.WaitGroup
			b.ResetTimer()
			for k := 0; k < clients; k++ {
				wg.Add(1)
				go func() {
					defer wg.Done()
					for {
						i := next.Add(1) - 1
						if i >= int64(b.N) {
							return
						}
						t0 := time.Now()
						if _, err := c.ScoreLine(context.Background(), lines[i%int64(len(lines))], ""); err != nil {
							b.Error(err)
							return
						}
						lat[k] = append(lat[k], time.Since(t0))
					}
				}()
			}
			wg.Wait()
			b.StopTimer()
			all := slices.Concat(lat...)
			slices.Sort(all)
			pct := func(p float64) float64 {
				return float64(all[min(len(all)-1, int(p*float64(len(all))))].Microseconds()) / 1000
			}
			b.ReportMetric(float64(b.N)/b.Elapsed().Seconds(), "lines/s")
			b.ReportMetric(pct(0.50), "p50_ms")
			b.ReportMetric(pct(0.90), "p90_ms")
			b.ReportMetric(pct(0.99), "p99_ms")
		})
	}
}
