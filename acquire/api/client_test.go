package api

import (
	"context"
	"errors"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
)

// A daemon that is not there is said in words a person can act on, and
// the cause stays reachable for programs.
func TestUnreachableDaemonInPlainWords(t *testing.T) {
	sock := filepath.Join(t.TempDir(), "none.sock")
	_, err := NewUnixClient(sock, "").Status(context.Background())
	want := "cannot reach the plateau daemon at unix:" + sock + " (is `plateau serve` running?): no such file or directory"
	if err == nil || err.Error() != want {
		t.Fatalf("error %q, want %q", err, want)
	}
	if !errors.Is(err, syscall.ENOENT) {
		t.Errorf("the cause is lost: %v", err)
	}
	for _, jargon := range []string{"http://", "dial", "Get "} {
		if strings.Contains(err.Error(), jargon) {
			t.Errorf("%q in %q", jargon, err)
		}
	}
}

// A refusal reads as a refusal; a failure says the daemon failed.
func TestDaemonAnswersInWords(t *testing.T) {
	for _, c := range []struct {
		e    Error
		want string
	}{
		{Error{Status: 409, Message: "no run is active"}, "the daemon refused: no run is active"},
		{Error{Status: 401, Message: "token missing"}, "the daemon refused the call: token missing (not authorised, HTTP 401)"},
		{Error{Status: 500, Message: "internal error"}, "the daemon failed: internal error (HTTP 500)"},
	} {
		if got := c.e.Error(); got != c.want {
			t.Errorf("%d: %q, want %q", c.e.Status, got, c.want)
		}
	}
}
