package report

import (
	"bufio"
	"bytes"
	"context"
	"encoding/base64"
	"encoding/json"
	"fmt"
	"image"
	"image/png"
	"io"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"weft/checkpoint/modeltest"
)

// The browser test loads the page in Debian's chromium, headless, through
// the DevTools protocol over a pipe (--remote-debugging-pipe: JSON messages
// ending in a NUL byte on file descriptors 3 and 4), and checks that the
// page logs no error, makes no network request, that every figure has a
// size, and that the screenshot of every figure area is not blank.

// chromiumFlags start a browser that reaches nothing by itself.
var chromiumFlags = []string{
	"--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
	"--disable-background-networking", "--disable-component-update", "--disable-sync",
	"--remote-debugging-pipe", "--hide-scrollbars", "--mute-audio",
}

// minColours is the least number of distinct colours a figure area must
// show: a blank or one-colour area has one or two (anti-aliased edges add
// a few); a plot has its lines, labels, grid and background.
const minColours = 6

// chromium finds the browser; under CI a missing one fails the test.
func chromium(t *testing.T) string {
	t.Helper()
	if testing.Short() {
		t.Skip("starts a browser; run without -short")
	}
	for _, name := range []string{os.Getenv("WEFT_CHROMIUM"), "chromium", "chromium-browser"} {
		if name == "" {
			continue
		}
		if p, err := exec.LookPath(name); err == nil {
			return p
		}
	}
	msg := "chromium not found (install it with 'apt-get install -y chromium', or set WEFT_CHROMIUM): the browser test needs it"
	if os.Getenv("CI") == "true" {
		t.Fatal(msg)
	}
	t.Skip(msg)
	return ""
}

// devtools is a client of the DevTools protocol over a pipe.
type devtools struct {
	w      io.Writer
	mu     sync.Mutex
	id     int
	wait   map[int]chan cdpMessage
	events []cdpMessage
	notify chan struct{}
}

type cdpMessage struct {
	ID        int             `json:"id,omitempty"`
	Method    string          `json:"method,omitempty"`
	SessionID string          `json:"sessionId,omitempty"`
	Params    json.RawMessage `json:"params,omitempty"`
	Result    json.RawMessage `json:"result,omitempty"`
	Error     *struct {
		Message string `json:"message"`
	} `json:"error,omitempty"`
}

func (d *devtools) read(r io.Reader) {
	br := bufio.NewReader(r)
	for {
		b, err := br.ReadBytes(0)
		if err != nil {
			return
		}
		var m cdpMessage
		if json.Unmarshal(b[:len(b)-1], &m) != nil {
			continue
		}
		d.mu.Lock()
		if m.ID != 0 {
			if c, ok := d.wait[m.ID]; ok {
				c <- m
				delete(d.wait, m.ID)
			}
		} else {
			d.events = append(d.events, m)
			select {
			case d.notify <- struct{}{}:
			default:
			}
		}
		d.mu.Unlock()
	}
}

// call sends a command and waits for its answer.
func (d *devtools) call(ctx context.Context, session, method string, params any, result any) error {
	d.mu.Lock()
	d.id++
	id := d.id
	c := make(chan cdpMessage, 1)
	d.wait[id] = c
	msg := map[string]any{"id": id, "method": method}
	if params != nil {
		msg["params"] = params
	}
	if session != "" {
		msg["sessionId"] = session
	}
	b, _ := json.Marshal(msg)
	_, err := d.w.Write(append(b, 0))
	d.mu.Unlock()
	if err != nil {
		return fmt.Errorf("%s: %w", method, err)
	}
	select {
	case m := <-c:
		if m.Error != nil {
			return fmt.Errorf("%s: %s", method, m.Error.Message)
		}
		if result != nil {
			return json.Unmarshal(m.Result, result)
		}
		return nil
	case <-ctx.Done():
		return fmt.Errorf("%s: %w", method, ctx.Err())
	}
}

// waitEvent waits for an event of the given method.
func (d *devtools) waitEvent(ctx context.Context, method string) error {
	for {
		d.mu.Lock()
		for _, e := range d.events {
			if e.Method == method {
				d.mu.Unlock()
				return nil
			}
		}
		d.mu.Unlock()
		select {
		case <-d.notify:
		case <-time.After(50 * time.Millisecond):
		case <-ctx.Done():
			return fmt.Errorf("waiting for %s: %w", method, ctx.Err())
		}
	}
}

// browserResult is what loading a page showed.
type browserResult struct {
	Errors   []string
	Requests []string
	Figures  []figureBox
	Shot     image.Image
	ShotPNG  []byte
}

type figureBox struct {
	ID                 string
	X, Y, W, H         float64
	InnerW, InnerH     float64
	HasSVG, HasShading bool
}

// loadInBrowser opens the file page in chromium and returns what it saw.
func loadInBrowser(t *testing.T, bin, page string) browserResult {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 90*time.Second)
	defer cancel()
	toChrome, ourEnd, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	fromChrome, chromeEnd, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	args := append(append([]string(nil), chromiumFlags...), "--user-data-dir="+t.TempDir(), "--window-size=1200,900", "about:blank")
	cmd := exec.CommandContext(ctx, bin, args...)
	cmd.ExtraFiles = []*os.File{toChrome, chromeEnd} // fd 3: commands in, fd 4: answers out
	var stderr bytes.Buffer
	cmd.Stderr = &stderr
	if err := cmd.Start(); err != nil {
		t.Fatalf("start %s: %v", bin, err)
	}
	toChrome.Close()
	chromeEnd.Close()
	defer func() {
		ourEnd.Close()
		done := make(chan struct{})
		go func() { cmd.Wait(); close(done) }()
		select {
		case <-done:
		case <-time.After(5 * time.Second):
			cmd.Process.Kill()
			<-done
		}
	}()
	d := &devtools{w: ourEnd, wait: map[int]chan cdpMessage{}, notify: make(chan struct{}, 1)}
	go d.read(fromChrome)

	fail := func(err error) {
		t.Helper()
		t.Fatalf("%v\nchromium's stderr:\n%s", err, stderr.String())
	}
	var created struct {
		TargetID string `json:"targetId"`
	}
	if err := d.call(ctx, "", "Target.createTarget", map[string]any{"url": "about:blank"}, &created); err != nil {
		fail(err)
	}
	var attached struct {
		SessionID string `json:"sessionId"`
	}
	if err := d.call(ctx, "", "Target.attachToTarget", map[string]any{"targetId": created.TargetID, "flatten": true}, &attached); err != nil {
		fail(err)
	}
	s := attached.SessionID
	for _, m := range []string{"Runtime.enable", "Log.enable", "Network.enable", "Page.enable"} {
		if err := d.call(ctx, s, m, nil, nil); err != nil {
			fail(err)
		}
	}
	if err := d.call(ctx, s, "Emulation.setDeviceMetricsOverride", map[string]any{"width": 1200, "height": 900, "deviceScaleFactor": 1, "mobile": false}, nil); err != nil {
		fail(err)
	}
	d.mu.Lock()
	d.events = nil // what about:blank did is not the page's
	d.mu.Unlock()
	pageURL := (&url.URL{Scheme: "file", Path: page}).String()
	if err := d.call(ctx, s, "Page.navigate", map[string]any{"url": pageURL}, nil); err != nil {
		fail(err)
	}
	if err := d.waitEvent(ctx, "Page.loadEventFired"); err != nil {
		fail(err)
	}
	// Give a reload or a late request the chance to show.
	time.Sleep(500 * time.Millisecond)

	var res browserResult
	var eval struct {
		Result struct {
			Value string `json:"value"`
		} `json:"result"`
	}
	js := `JSON.stringify(Array.from(document.querySelectorAll("figure")).map(f => {
	  const r = f.getBoundingClientRect();
	  const inner = f.querySelector("svg, .shade");
	  const ir = inner ? inner.getBoundingClientRect() : {width: 0, height: 0};
	  return {ID: f.id, X: r.left + scrollX, Y: r.top + scrollY, W: r.width, H: r.height,
	    InnerW: ir.width, InnerH: ir.height, HasSVG: !!f.querySelector("svg"), HasShading: !!f.querySelector(".shade")};
	}))`
	if err := d.call(ctx, s, "Runtime.evaluate", map[string]any{"expression": js, "returnByValue": true}, &eval); err != nil {
		fail(err)
	}
	if err := json.Unmarshal([]byte(eval.Result.Value), &res.Figures); err != nil {
		fail(fmt.Errorf("figure boxes %q: %w", eval.Result.Value, err))
	}
	var metrics struct {
		CSSContentSize struct{ Width, Height float64 } `json:"cssContentSize"`
	}
	if err := d.call(ctx, s, "Page.getLayoutMetrics", nil, &metrics); err != nil {
		fail(err)
	}
	var shot struct {
		Data string `json:"data"`
	}
	clip := map[string]any{"x": 0, "y": 0, "width": 1200, "height": metrics.CSSContentSize.Height, "scale": 1}
	if err := d.call(ctx, s, "Page.captureScreenshot", map[string]any{"format": "png", "captureBeyondViewport": true, "clip": clip}, &shot); err != nil {
		fail(err)
	}
	if res.ShotPNG, err = base64.StdEncoding.DecodeString(shot.Data); err != nil {
		fail(err)
	}
	if res.Shot, err = png.Decode(bytes.NewReader(res.ShotPNG)); err != nil {
		fail(err)
	}

	d.mu.Lock()
	defer d.mu.Unlock()
	for _, e := range d.events {
		switch e.Method {
		case "Runtime.exceptionThrown":
			res.Errors = append(res.Errors, "exception: "+string(e.Params))
		case "Runtime.consoleAPICalled":
			var p struct {
				Type string `json:"type"`
			}
			json.Unmarshal(e.Params, &p)
			if p.Type == "error" || p.Type == "warning" || p.Type == "assert" {
				res.Errors = append(res.Errors, "console: "+string(e.Params))
			}
		case "Log.entryAdded":
			var p struct {
				Entry struct{ Level, Text string } `json:"entry"`
			}
			json.Unmarshal(e.Params, &p)
			if p.Entry.Level == "error" || p.Entry.Level == "warning" {
				res.Errors = append(res.Errors, "log: "+p.Entry.Text)
			}
		case "Network.requestWillBeSent":
			var p struct {
				Request struct{ URL string } `json:"request"`
			}
			json.Unmarshal(e.Params, &p)
			res.Requests = append(res.Requests, p.Request.URL)
		}
	}
	// The page's own file is the one request allowed.
	var others []string
	for _, u := range res.Requests {
		if u != pageURL {
			others = append(others, u)
		}
	}
	res.Requests = others
	return res
}

// distinctColours counts the colours of img inside r.
func distinctColours(img image.Image, r image.Rectangle) int {
	seen := map[[3]uint32]bool{}
	r = r.Intersect(img.Bounds())
	for y := r.Min.Y; y < r.Max.Y; y += 2 {
		for x := r.Min.X; x < r.Max.X; x += 2 {
			c0, c1, c2, _ := img.At(x, y).RGBA()
			seen[[3]uint32{c0 >> 8, c1 >> 8, c2 >> 8}] = true
		}
	}
	return len(seen)
}

// fullPage writes the page of the fixed run with the surprisal view and
// samples of the seeded test model, so that every element is on it.
func fullPage(t *testing.T) string {
	t.Helper()
	dir := fixture(t)
	d, err := Gather(dir)
	if err != nil {
		t.Fatal(err)
	}
	d.Run = filepath.Join("testdata", "run")
	m := modeltest.New(t, modeltest.Corpus, "char", "line")
	toks := m.Vocab.Encode(nil, strings.Repeat(modeltest.Corpus, 70))
	if d.Surprisal, err = NewSurprisal(context.Background(), m, uniform{m.Vocab.Len()}, "uniform", "test", toks, nil, 0); err != nil {
		t.Fatal(err)
	}
	if d.Samples, err = Samples(context.Background(), m); err != nil {
		t.Fatal(err)
	}
	if err := Write(dir, d); err != nil {
		t.Fatal(err)
	}
	return PagePath(dir)
}

func TestBrowser(t *testing.T) {
	bin := chromium(t)
	// WEFT_REPORT_PAGE checks another page instead (the README's
	// screenshot is of the demo run's page: see testdata/README.md).
	page := os.Getenv("WEFT_REPORT_PAGE")
	if page == "" {
		page = fullPage(t)
	}
	page, err := filepath.Abs(page)
	if err != nil {
		t.Fatal(err)
	}
	res := loadInBrowser(t, bin, page)
	if len(res.Errors) > 0 {
		t.Errorf("the page logged errors:\n%s", strings.Join(res.Errors, "\n"))
	}
	if len(res.Requests) > 0 {
		t.Errorf("the page made network requests: %q", res.Requests)
	}
	var plots, shades int
	for _, f := range res.Figures {
		if f.W <= 0 || f.H <= 0 || f.InnerW <= 0 || f.InnerH <= 0 {
			t.Errorf("figure %s has no size: %+v", f.ID, f)
			continue
		}
		if f.HasSVG {
			plots++
		}
		if f.HasShading {
			shades++
		}
		r := image.Rect(int(f.X), int(f.Y), int(f.X+f.W), int(f.Y+f.H))
		if n := distinctColours(res.Shot, r); n < minColours {
			t.Errorf("figure %s looks blank in the screenshot: %d distinct colours in %v, want at least %d", f.ID, n, r, minColours)
		}
	}
	// 7 plots of the fixed run (and the demo's); model, baseline and
	// difference shading.
	if plots != 7 || shades != 3 {
		t.Errorf("got %d plots and %d shaded texts, want 7 and 3", plots, shades)
	}
	if n := distinctColours(res.Shot, res.Shot.Bounds()); n < 50 {
		t.Errorf("the whole screenshot has %d distinct colours; want a drawn page", n)
	}
	if *update {
		top := res.Shot.(interface {
			SubImage(image.Rectangle) image.Image
		}).SubImage(image.Rect(0, 0, 1200, min(1500, res.Shot.Bounds().Dy())))
		var b bytes.Buffer
		if err := png.Encode(&b, top); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join("testdata", "screenshot.png"), b.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
}

// TestBrowserCatches loads a page with each fault the browser test looks
// for, so that its checks are seen to fail.
func TestBrowserCatches(t *testing.T) {
	bin := chromium(t)
	page := filepath.Join(t.TempDir(), "bad.html")
	bad := `<!DOCTYPE html><html><head><meta charset="utf-8"><title>bad</title></head><body>
<figure id="blank" style="width:300px;height:200px;background:#fff"><svg width="300" height="200"></svg></figure>
<figure id="empty"><svg width="0" height="0"></svg></figure>
<img src="http://127.0.0.1:9/x.png" alt="">
<script>console.error("broken"); undefinedFunction();</script>
</body></html>`
	if err := os.WriteFile(page, []byte(bad), 0o644); err != nil {
		t.Fatal(err)
	}
	res := loadInBrowser(t, bin, page)
	var console, exception bool
	for _, e := range res.Errors {
		console = console || strings.Contains(e, "broken")
		exception = exception || strings.Contains(e, "undefinedFunction")
	}
	if !console || !exception {
		t.Errorf("errors seen %q; want the console error and the exception", res.Errors)
	}
	if len(res.Requests) == 0 || !strings.Contains(strings.Join(res.Requests, " "), "127.0.0.1:9") {
		t.Errorf("requests seen %q; want the image's", res.Requests)
	}
	for _, f := range res.Figures {
		switch f.ID {
		case "blank":
			r := image.Rect(int(f.X), int(f.Y), int(f.X+f.W), int(f.Y+f.H))
			if n := distinctColours(res.Shot, r); n >= minColours {
				t.Errorf("a blank figure shows %d colours, want fewer than %d", n, minColours)
			}
		case "empty":
			if f.InnerW > 0 && f.InnerH > 0 {
				t.Errorf("an empty figure has size %+v", f)
			}
		}
	}
}
