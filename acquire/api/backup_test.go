package api

import (
	"context"
	"net/http/httptest"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
)

// A backup taken through the daemon while samples are still being written
// is a whole bbolt file: it opens, passes the consistency check and holds
// every point committed before the copy began.
func TestBackupWhileWriting(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	ctx := context.Background()
	id, err := h.unix.Start(ctx, StartRequest{Label: "backup"})
	if err != nil {
		t.Fatal(err)
	}
	run, _ := store.ParseRunID(id)
	for i := range 5 {
		h.addPoint(run, i, float64(i)*1e5, float64(i)*1e5+10)
	}
	stop := make(chan struct{})
	written := make(chan struct{})
	go func() { // the bench keeps recording during the copy
		defer close(written)
		at := time.Now()
		for i := 0; ; i++ {
			select {
			case <-stop:
				return
			default:
			}
			h.st.Put(run, "ref", store.Sample{Time: at.Add(time.Duration(i) * time.Millisecond), Pa: float64(i), Raw: float64(i), RawUnit: "Pa"})
		}
	}()
	// Every sample is committed before the harness checks the store:
	// bbolt's check must not run beside a write.
	defer func() { close(stop); <-written; h.st.Flush() }()
	h.st.Flush()

	for _, c := range []struct {
		name   string
		client *Client
	}{{"unix socket", h.unix}, {"loopback TCP", h.http}} {
		t.Run(c.name, func(t *testing.T) {
			path := filepath.Join(t.TempDir(), "copy.db")
			f, err := os.Create(path)
			if err != nil {
				t.Fatal(err)
			}
			n, err := c.client.Backup(ctx, f)
			f.Close()
			if err != nil {
				t.Fatal(err)
			}
			if fi, err := os.Stat(path); err != nil || fi.Size() != n || n == 0 {
				t.Fatalf("copy of %d bytes, file %v, %v", n, fi, err)
			}
			cp, err := store.Open(path, store.Options{ReadOnly: true})
			if err != nil {
				t.Fatal(err)
			}
			defer cp.Close()
			if err := cp.Check(); err != nil {
				t.Fatalf("the copy fails its check: %v", err)
			}
			pts, err := cp.Points(run)
			if err != nil || len(pts) != 5 {
				t.Fatalf("copy holds %d points (%v), want 5", len(pts), err)
			}
		})
	}
}

// Records without a Backup method: the call answers 501 with the reason.
func TestBackupUnsupported(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	srv, err := New(Options{Control: h.bench, Records: struct{ Records }{h.st}, Feed: h.bench.feed})
	if err != nil {
		t.Fatal(err)
	}
	rec := httptest.NewRecorder()
	srv.Handler(Local).ServeHTTP(rec, httptest.NewRequest("GET", "/api/v1/backup", nil))
	if rec.Code != 501 || !strings.Contains(rec.Body.String(), "cannot be copied") {
		t.Fatalf("status %d %s, want 501", rec.Code, rec.Body)
	}
}
