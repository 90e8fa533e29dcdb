package api

import (
	"bufio"
	"context"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"
)

// A page elsewhere that resolves its own name to 127.0.0.1 (DNS
// rebinding) sends its own name as Host: it is refused; loopback names and
// the listener's address are answered.
func TestHostHeaderMustNameThisDaemon(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	port := h.tcp[strings.LastIndex(h.tcp, ":")+1:]
	cases := []struct {
		host string
		want int
	}{
		{"127.0.0.1:" + port, http.StatusOK},
		{"localhost:" + port, http.StatusOK},
		{"LOCALHOST", http.StatusOK},
		{"evil.example:" + port, http.StatusMisdirectedRequest},
		{"127.0.0.1.nip.example", http.StatusMisdirectedRequest},
	}
	for _, c := range cases {
		req, err := http.NewRequest(http.MethodGet, "http://"+h.tcp+"/api/v1/status", nil)
		if err != nil {
			t.Fatal(err)
		}
		req.Host = c.host
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != c.want {
			t.Errorf("Host %q: %d, want %d", c.host, resp.StatusCode, c.want)
		}
	}
}

// Event-stream viewers are capped: one more than the limit is refused with
// a clear reason, and a slot frees when a viewer leaves.
func TestViewerLimit(t *testing.T) {
	h := newHarness(t, harnessOptions{maxViewers: 3})
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	open := func() (*http.Response, error) {
		req, _ := http.NewRequestWithContext(ctx, http.MethodGet, "http://"+h.tcp+"/api/v1/events", nil)
		req.Header.Set("Accept", "text/event-stream")
		return http.DefaultClient.Do(req)
	}
	var streams []*http.Response
	for i := 0; i < 3; i++ {
		resp, err := open()
		if err != nil || resp.StatusCode != http.StatusOK {
			t.Fatalf("viewer %d: %v %v", i+1, resp.StatusCode, err)
		}
		bufio.NewReader(resp.Body).ReadString('\n') // the stream has started
		streams = append(streams, resp)
	}
	resp, err := open()
	if err != nil {
		t.Fatal(err)
	}
	body := make([]byte, 512)
	n, _ := resp.Body.Read(body)
	resp.Body.Close()
	if resp.StatusCode != http.StatusServiceUnavailable || !strings.Contains(string(body[:n]), "too many event viewers") {
		t.Fatalf("fourth viewer: %d %s", resp.StatusCode, body[:n])
	}
	streams[0].Body.Close()
	deadline := time.Now().Add(5 * time.Second)
	for {
		resp, err := open()
		if err == nil && resp.StatusCode == http.StatusOK {
			resp.Body.Close()
			break
		}
		if resp != nil {
			resp.Body.Close()
		}
		if time.Now().After(deadline) {
			t.Fatal("no slot freed after a viewer left")
		}
		time.Sleep(20 * time.Millisecond)
	}
	for _, s := range streams[1:] {
		s.Body.Close()
	}
}

// A token file others can write is refused: anyone could set the token.
func TestTokenFileWritableByOthersRefused(t *testing.T) {
	for _, mode := range []os.FileMode{0o602, 0o620, 0o666} {
		path := filepath.Join(t.TempDir(), "token")
		if err := os.WriteFile(path, []byte(strings.Repeat("a1", 20)+"\n"), 0o600); err != nil {
			t.Fatal(err)
		}
		if err := os.Chmod(path, mode); err != nil {
			t.Fatal(err)
		}
		if _, err := LoadToken(path); err == nil {
			t.Errorf("mode %#o accepted", mode)
		}
	}
}
