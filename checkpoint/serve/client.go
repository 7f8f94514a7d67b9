package serve

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strings"
)

// Client calls a scoring service. Its methods are safe for concurrent use.
type Client struct {
	// Base is the service's address, such as "http://127.0.0.1:8750".
	Base string
	// HTTP is the client the calls go through; nil means
	// http.DefaultClient.
	HTTP *http.Client
}

// NewClient returns a client of the service at base.
func NewClient(base string) *Client {
	return &Client{Base: strings.TrimSuffix(base, "/")}
}

// APIError is an error answer of the service.
type APIError struct {
	Status  int    // the HTTP status, 4xx or 5xx
	Message string // the service's one-line reason
}

func (e *APIError) Error() string {
	return fmt.Sprintf("service answered %d %s: %s", e.Status, http.StatusText(e.Status), e.Message)
}

func (c *Client) http() *http.Client {
	if c.HTTP != nil {
		return c.HTTP
	}
	return http.DefaultClient
}

// do sends method path with body (JSON-encoded unless nil) and decodes
// the answer into out.
func (c *Client) do(ctx context.Context, method, path string, body, out any) error {
	var rd io.Reader
	if body != nil {
		b, err := json.Marshal(body)
		if err != nil {
			return err
		}
		rd = bytes.NewReader(b)
	}
	req, err := http.NewRequestWithContext(ctx, method, c.Base+path, rd)
	if err != nil {
		return err
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	resp, err := c.http().Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	return decodeAnswer(resp, out)
}

func decodeAnswer(resp *http.Response, out any) error {
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		return fmt.Errorf("read answer: %w", err)
	}
	if resp.StatusCode != http.StatusOK {
		var e errorBody
		if json.Unmarshal(b, &e) != nil || e.Error == "" {
			e.Error = strings.TrimSpace(string(b))
		}
		return &APIError{Status: resp.StatusCode, Message: e.Error}
	}
	if err := json.Unmarshal(b, out); err != nil {
		return fmt.Errorf("decode answer: %w", err)
	}
	return nil
}

// Score scores the lines of req.
func (c *Client) Score(ctx context.Context, req ScoreRequest) (*ScoreResponse, error) {
	var out ScoreResponse
	if err := c.do(ctx, http.MethodPost, "/v1/score", req, &out); err != nil {
		return nil, err
	}
	return &out, nil
}

// ScoreLine scores one line, in the context of stream when it is not
// empty.
func (c *Client) ScoreLine(ctx context.Context, line, stream string) (ScoredLine, error) {
	req := ScoreRequest{Lines: []string{line}}
	if stream != "" {
		req.Stream = &StreamOptions{Name: stream}
	}
	r, err := c.Score(ctx, req)
	if err != nil {
		return ScoredLine{}, err
	}
	if len(r.Rows) != 1 {
		return ScoredLine{}, fmt.Errorf("service answered %d rows for one line", len(r.Rows))
	}
	return r.Rows[0], nil
}

// ScoreStream sends the lines as one /v1/score/lines request and calls
// row with each scored line as it arrives. An error row ends the call
// with its message.
func (c *Client) ScoreStream(ctx context.Context, lines []LineRequest, row func(ScoredLine) error) error {
	pr, pw := io.Pipe()
	go func() {
		enc := json.NewEncoder(pw)
		for _, l := range lines {
			if err := enc.Encode(l); err != nil {
				pw.CloseWithError(err)
				return
			}
		}
		pw.Close()
	}()
	defer pr.Close()
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, c.Base+"/v1/score/lines", pr)
	if err != nil {
		return err
	}
	req.Header.Set("Content-Type", "application/x-ndjson")
	resp, err := c.http().Do(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		return decodeAnswer(resp, nil)
	}
	sc := bufio.NewScanner(resp.Body)
	sc.Buffer(make([]byte, 64<<10), 16<<20)
	for sc.Scan() {
		var r ScoredLine
		if err := json.Unmarshal(sc.Bytes(), &r); err != nil {
			return fmt.Errorf("decode row: %w", err)
		}
		if r.Error != "" {
			return &APIError{Status: http.StatusOK, Message: r.Error}
		}
		if err := row(r); err != nil {
			return err
		}
	}
	if err := sc.Err(); err != nil && !errors.Is(err, io.EOF) {
		return fmt.Errorf("read rows: %w", err)
	}
	return nil
}

// Sample continues a prompt.
func (c *Client) Sample(ctx context.Context, req SampleRequest) (*SampleResponse, error) {
	var out SampleResponse
	if err := c.do(ctx, http.MethodPost, "/v1/sample", req, &out); err != nil {
		return nil, err
	}
	return &out, nil
}

// Health asks whether the service is up.
func (c *Client) Health(ctx context.Context) (Health, error) {
	var h Health
	err := c.do(ctx, http.MethodGet, "/v1/health", nil, &h)
	return h, err
}

// Model returns the facts of the model being served.
func (c *Client) Model(ctx context.Context) (Facts, error) {
	var f Facts
	err := c.do(ctx, http.MethodGet, "/v1/model", nil, &f)
	return f, err
}

// Reload asks the service to load its checkpoint again.
func (c *Client) Reload(ctx context.Context) (Facts, error) {
	var f Facts
	err := c.do(ctx, http.MethodPost, "/v1/reload", struct{}{}, &f)
	return f, err
}
