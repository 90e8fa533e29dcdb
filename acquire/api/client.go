package api

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"net"
	"net/http"
	"net/url"
	"os"
	"strings"
	"time"

	"plateau/analysis"
)

// callTimeout bounds one ordinary call (not the event stream).
const callTimeout = 30 * time.Second

// Client calls a plateau daemon over its unix socket or TCP.
type Client struct {
	base  string // scheme://host, no trailing slash
	where string // for messages: the socket path or URL
	token string
	hc    *http.Client
}

// NewUnixClient calls the daemon through the unix socket at path.
func NewUnixClient(path, token string) *Client {
	tr := &http.Transport{
		DialContext: func(ctx context.Context, _, _ string) (net.Conn, error) {
			var d net.Dialer
			return d.DialContext(ctx, "unix", path)
		},
		MaxIdleConns:    4,
		IdleConnTimeout: 30 * time.Second,
	}
	return &Client{base: "http://plateau", where: "unix:" + path, token: token, hc: &http.Client{Transport: tr}}
}

// NewTCPClient calls the daemon at a base URL such as http://127.0.0.1:8417.
func NewTCPClient(rawURL, token string) (*Client, error) {
	u, err := url.Parse(rawURL)
	if err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		return nil, fmt.Errorf("daemon URL %q: want http://host:port", rawURL)
	}
	base := u.Scheme + "://" + u.Host
	return &Client{base: base, where: base, token: token, hc: &http.Client{}}, nil
}

// Error is a refusal from the daemon.
type Error struct {
	Status  int
	Message string
}

// Error says in words whether the daemon refused the call (it is fine,
// the request is not possible or not allowed) or failed at it; the HTTP
// status is for whoever debugs the daemon, so it comes last.
func (e *Error) Error() string {
	switch {
	case e.Status == http.StatusUnauthorized || e.Status == http.StatusForbidden:
		return fmt.Sprintf("the daemon refused the call: %s (not authorised, HTTP %d)", e.Message, e.Status)
	case e.Status >= 500:
		return fmt.Sprintf("the daemon failed: %s (HTTP %d)", e.Message, e.Status)
	}
	return fmt.Sprintf("the daemon refused: %s", e.Message)
}

// IsStatus reports whether err is a daemon refusal with the given status.
func IsStatus(err error, status int) bool {
	var e *Error
	return errors.As(err, &e) && e.Status == status
}

func (c *Client) newRequest(ctx context.Context, method, path string, body any) (*http.Request, error) {
	var rd io.Reader
	if body != nil {
		b, err := json.Marshal(body)
		if err != nil {
			return nil, fmt.Errorf("encode request: %w", err)
		}
		rd = bytes.NewReader(b)
	}
	req, err := http.NewRequestWithContext(ctx, method, c.base+path, rd)
	if err != nil {
		return nil, err
	}
	if body != nil {
		req.Header.Set("Content-Type", "application/json")
	}
	if c.token != "" {
		req.Header.Set("Authorization", "Bearer "+c.token)
	}
	return req, nil
}

// unreachable is a call that found no daemon. Its text keeps to what a
// person can act on ("connection refused", "no such file or directory"),
// not the request the library was making; errors.As still finds the rest.
type unreachable struct {
	where string
	err   error
}

func (u *unreachable) Error() string {
	why := u.err
	var ue *url.Error
	if errors.As(why, &ue) {
		why = ue.Err
	}
	var oe *net.OpError
	if errors.As(why, &oe) {
		why = oe.Err
	}
	var se *os.SyscallError
	if errors.As(why, &se) {
		why = se.Err
	}
	return fmt.Sprintf("cannot reach the plateau daemon at %s (is `plateau serve` running?): %v", u.where, why)
}

func (u *unreachable) Unwrap() error { return u.err }

// send makes a call and returns the response when its status is 2xx.
func (c *Client) send(req *http.Request) (*http.Response, error) {
	resp, err := c.hc.Do(req)
	if err != nil {
		if ctxErr := req.Context().Err(); ctxErr != nil {
			return nil, ctxErr
		}
		return nil, &unreachable{where: c.where, err: err}
	}
	if resp.StatusCode/100 == 2 {
		return resp, nil
	}
	defer resp.Body.Close()
	var p Problem
	raw, _ := io.ReadAll(io.LimitReader(resp.Body, 64<<10))
	if json.Unmarshal(raw, &p) != nil || p.Error == "" {
		p.Error = strings.TrimSpace(string(raw))
	}
	return nil, &Error{Status: resp.StatusCode, Message: p.Error}
}

// call makes an ordinary call; out, when not nil, receives the JSON reply.
func (c *Client) call(ctx context.Context, method, path string, body, out any) error {
	ctx, cancel := context.WithTimeout(ctx, callTimeout)
	defer cancel()
	req, err := c.newRequest(ctx, method, path, body)
	if err != nil {
		return err
	}
	resp, err := c.send(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if out == nil {
		_, err = io.Copy(io.Discard, resp.Body)
		return err
	}
	if err := json.NewDecoder(resp.Body).Decode(out); err != nil {
		return fmt.Errorf("%s %s: reply is not what this client understands: %w", method, path, err)
	}
	return nil
}

// Status asks for the daemon's and the current run's state.
func (c *Client) Status(ctx context.Context) (Status, error) {
	var st Status
	return st, c.call(ctx, http.MethodGet, "/api/v1/status", nil, &st)
}

// Runs lists every run, oldest first.
// Ready asks whether the daemon can do its job; the error says why not.
func (c *Client) Ready(ctx context.Context) error {
	return c.call(ctx, http.MethodGet, "/readyz", nil, nil)
}

func (c *Client) Runs(ctx context.Context) ([]RunInfo, error) {
	var out struct {
		Runs []RunInfo `json:"runs"`
	}
	return out.Runs, c.call(ctx, http.MethodGet, "/api/v1/runs", nil, &out)
}

// Run returns one run; id may be "last".
func (c *Client) Run(ctx context.Context, id string) (RunDetail, error) {
	var out RunDetail
	return out, c.call(ctx, http.MethodGet, "/api/v1/runs/"+url.PathEscape(id), nil, &out)
}

// Points returns a run's captured points in capture order.
func (c *Client) Points(ctx context.Context, id string) ([]analysis.Point, error) {
	var out struct {
		Points []analysis.Point `json:"points"`
	}
	return out.Points, c.call(ctx, http.MethodGet, "/api/v1/runs/"+url.PathEscape(id)+"/points", nil, &out)
}

// Start begins a run and returns its id.
func (c *Client) Start(ctx context.Context, req StartRequest) (string, error) {
	var out Started
	return out.Run, c.call(ctx, http.MethodPost, "/api/v1/start", req, &out)
}

// Stop ends the current run.
func (c *Client) Stop(ctx context.Context, reason string) error {
	return c.call(ctx, http.MethodPost, "/api/v1/stop", StopRequest{Reason: reason}, nil)
}

// Pause holds the current run.
func (c *Client) Pause(ctx context.Context) error {
	return c.call(ctx, http.MethodPost, "/api/v1/pause", nil, nil)
}

// Resume carries on a paused run.
func (c *Client) Resume(ctx context.Context) error {
	return c.call(ctx, http.MethodPost, "/api/v1/resume", nil, nil)
}

// Enter hands an operator's dial reading to the current step.
func (c *Client) Enter(ctx context.Context, e Entry) error {
	return c.call(ctx, http.MethodPost, "/api/v1/entry", e, nil)
}

// Report writes a run's report in format json, csv or html to w.
func (c *Client) Report(ctx context.Context, id, format string, w io.Writer) error {
	ctx, cancel := context.WithTimeout(ctx, callTimeout)
	defer cancel()
	req, err := c.newRequest(ctx, http.MethodGet, "/api/v1/runs/"+url.PathEscape(id)+"/report?format="+url.QueryEscape(format), nil)
	if err != nil {
		return err
	}
	resp, err := c.send(req)
	if err != nil {
		return err
	}
	defer resp.Body.Close()
	if _, err := io.Copy(w, resp.Body); err != nil {
		return fmt.Errorf("report %s: %w", id, err)
	}
	return nil
}
