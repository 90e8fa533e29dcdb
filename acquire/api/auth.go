package api

import (
	"crypto/sha256"
	"crypto/subtle"
	"fmt"
	"net/http"
	"os"
	"strings"
	"unicode"
)

// MinTokenLength is the shortest bearer token the daemon accepts.
const MinTokenLength = 16

// guard lets a call through when the caller's trust allows it. Missing
// credentials get 401, wrong ones 403; neither says more than that.
func (s *Server) guard(access Access, changes bool, next http.HandlerFunc) http.Handler {
	need := access == Remote || (access == Loopback && changes)
	if !need {
		return next
	}
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		got, ok := bearer(r)
		if !ok {
			w.Header().Set("WWW-Authenticate", `Bearer realm="plateau"`)
			writeProblem(w, http.StatusUnauthorized, "unauthorized")
			return
		}
		if !s.tokenMatches(got) {
			writeProblem(w, http.StatusForbidden, "forbidden")
			return
		}
		next(w, r)
	})
}

func bearer(r *http.Request) (string, bool) {
	h := r.Header.Get("Authorization")
	scheme, tok, ok := strings.Cut(h, " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") {
		return "", false
	}
	tok = strings.TrimSpace(tok)
	return tok, tok != ""
}

// tokenMatches compares in constant time; hashing first hides the length too.
// With no token configured nothing matches.
func (s *Server) tokenMatches(got string) bool {
	if s.o.Token == "" {
		return false
	}
	a := sha256.Sum256([]byte(got))
	b := sha256.Sum256([]byte(s.o.Token))
	return subtle.ConstantTimeCompare(a[:], b[:]) == 1
}

// LoadToken reads a bearer token from a file: the first line, trimmed. It
// refuses short tokens, tokens with spaces or control characters, and files
// that everyone may read.
func LoadToken(path string) (string, error) {
	fi, err := os.Stat(path)
	if err != nil {
		return "", fmt.Errorf("token file: %w", err)
	}
	if fi.Mode().Perm()&0o004 != 0 {
		return "", fmt.Errorf("token file %s: readable by every user (mode %#o); chmod 0640 or 0600", path, fi.Mode().Perm())
	}
	if fi.Mode().Perm()&0o022 != 0 {
		return "", fmt.Errorf("token file %s: writable by others (mode %#o), so anyone could set the token; chmod 0640 or 0600", path, fi.Mode().Perm())
	}
	data, err := os.ReadFile(path)
	if err != nil {
		return "", fmt.Errorf("token file: %w", err)
	}
	tok, _, _ := strings.Cut(string(data), "\n")
	tok = strings.TrimSpace(tok)
	switch {
	case len(tok) < MinTokenLength:
		return "", fmt.Errorf("token file %s: token has %d characters, at least %d needed (e.g. openssl rand -hex 32)", path, len(tok), MinTokenLength)
	case strings.IndexFunc(tok, func(r rune) bool { return unicode.IsSpace(r) || unicode.IsControl(r) }) >= 0:
		return "", fmt.Errorf("token file %s: token contains spaces or control characters", path)
	}
	return tok, nil
}
