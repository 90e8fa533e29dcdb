package api

import (
	"encoding/json"
	"io/fs"
	"net/http"
	"regexp"
	"strings"
	"testing"
)

// TestPageFiles serves the page and every file it names, and checks the
// guards a browser relies on: a content security policy that allows only
// the daemon's own files, and no file outside the page's folder.
func TestPageFiles(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	remote := serveExtra(t, h.srv, Remote, testToken)
	code, hdr, body := raw(t, h.http, "GET", "/", "", "", "")
	if code != http.StatusOK || !strings.HasPrefix(hdr.Get("Content-Type"), "text/html") {
		t.Fatalf("GET / = %d %s", code, hdr.Get("Content-Type"))
	}
	if csp := hdr.Get("Content-Security-Policy"); !strings.Contains(csp, "default-src 'self'") || !strings.Contains(csp, "frame-ancestors 'none'") {
		t.Fatalf("content security policy %q", csp)
	}
	// Every script and style the page names is served from the binary.
	refs := regexp.MustCompile(`(?:src|href)="(/page/[^"]+)"`).FindAllStringSubmatch(body, -1)
	if len(refs) < 4 {
		t.Fatalf("the page names %d files: %v", len(refs), refs)
	}
	types := map[string]string{".js": "text/javascript", ".css": "text/css"}
	for _, r := range refs {
		code, hdr, data := raw(t, h.http, "GET", r[1], "", "", "")
		ext := r[1][strings.LastIndex(r[1], "."):]
		if code != http.StatusOK || len(data) == 0 || !strings.HasPrefix(hdr.Get("Content-Type"), types[ext]) {
			t.Errorf("GET %s = %d, %d bytes, %s", r[1], code, len(data), hdr.Get("Content-Type"))
		}
	}
	// The page uses no inline script, which the policy would block.
	if regexp.MustCompile(`<script>|<script [^>]*>[^<]+</script>| on[a-z]+="`).MatchString(body) {
		t.Error("the page has inline script or handlers")
	}
	for _, c := range []struct {
		name string
		c    *Client
		path string
		auth string
		code int
	}{
		{"missing file", h.http, "/page/nothing.js", "", 404},
		{"outside the folder", h.http, "/page/../api.go", "", 404},
		{"encoded escape", h.http, "/page/..%2fapi.go", "", 404},
		{"licence of the charting library", h.http, "/page/vendor/uplot/LICENSE", "", 200},
		{"remote without token", remote, "/", "", 401},
		{"remote with token", remote, "/", "Bearer " + testToken, 200},
	} {
		t.Run(c.name, func(t *testing.T) {
			if code, _, body := raw(t, c.c, "GET", c.path, c.auth, "", ""); code != c.code {
				t.Fatalf("GET %s = %d, want %d: %.200s", c.path, code, c.code, body)
			}
		})
	}
}

// TestPageEmbedsTheLicence checks that the vendored library ships with its
// licence and version note.
func TestPageEmbedsTheLicence(t *testing.T) {
	for _, name := range []string{"LICENSE", "VERSION", "uPlot.iife.min.js", "uPlot.min.css"} {
		data, err := fs.ReadFile(pageFiles, "page/vendor/uplot/"+name)
		if err != nil || len(data) == 0 {
			t.Errorf("page/vendor/uplot/%s: %v", name, err)
		}
	}
	version, _ := fs.ReadFile(pageFiles, "page/vendor/uplot/VERSION")
	lib, _ := fs.ReadFile(pageFiles, "page/vendor/uplot/uPlot.iife.min.js")
	if !strings.Contains(string(version), "1.6.32") || !strings.Contains(string(lib), "uPlot") {
		t.Errorf("version note %q does not match the library", version)
	}
}

// TestUnits checks the page's conversion table against published factors.
func TestUnits(t *testing.T) {
	h := newHarness(t, harnessOptions{})
	code, _, body := raw(t, h.http, "GET", "/api/v1/units", "", "", "")
	if code != 200 {
		t.Fatalf("GET /api/v1/units = %d", code)
	}
	var table map[string]float64
	if err := json.Unmarshal([]byte(body), &table); err != nil {
		t.Fatal(err)
	}
	// Factors from NIST SP 811 (2008), appendix B.8: bar, psi (pound-force
	// per square inch), millimetre of mercury (conventional) and the
	// standard atmosphere, in pascal.
	for _, c := range []struct {
		unit string
		pa   float64
		tol  float64
	}{
		{"Pa", 1, 0},
		{"kPa", 1e3, 0},
		{"bar", 1e5, 0},
		{"mbar", 100, 0},
		{"psi", 6.894757e3, 1e-3},
		{"mmHg", 1.333224e2, 1e-4},
		{"atm", 1.01325e5, 0},
	} {
		got, ok := table[c.unit]
		if !ok {
			t.Errorf("no %s in the table", c.unit)
			continue
		}
		if d := got - c.pa; d > c.tol || d < -c.tol {
			t.Errorf("1 %s = %g Pa, want %g Pa", c.unit, got, c.pa)
		}
	}
}
