package api

import (
	"bytes"
	"embed"
	"fmt"
	"io/fs"
	"net/http"
	"path"
	"time"

	"plateau/analysis/units"
)

// pageFiles is the live page: plain HTML, CSS and JavaScript with a
// vendored charting library, all in the binary (no CDN, no build step).
//
//go:embed page/index.html page/app.js page/page.css page/vendor/uplot
var pageFiles embed.FS

// pagePolicy keeps the page to its own files: no inline script, no other
// origin, no framing by another site.
const pagePolicy = "default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' data:; " +
	"connect-src 'self'; frame-ancestors 'none'; base-uri 'none'; form-action 'none'"

// builtAt stands for the embedded files' modification time in conditional
// requests: they change only with the binary.
var builtAt = time.Now()

// handlePage serves the page at / and its files under /page/.
func (s *Server) handlePage(w http.ResponseWriter, r *http.Request) {
	name := "index.html"
	if f := r.PathValue("file"); f != "" {
		name = path.Clean(f)
	}
	data, err := fs.ReadFile(pageFiles, "page/"+name)
	if err != nil {
		writeProblem(w, http.StatusNotFound, fmt.Sprintf("no page file %q", name))
		return
	}
	h := w.Header()
	h.Set("Content-Security-Policy", pagePolicy)
	h.Set("X-Content-Type-Options", "nosniff")
	h.Set("Referrer-Policy", "no-referrer")
	h.Set("Cache-Control", "no-cache") // revalidate: a new binary may bring new files
	http.ServeContent(w, r, name, builtAt, bytes.NewReader(data))
}

// unitTable lists the pressure units the daemon knows as pascals per unit,
// so the page converts with the same factors as the reports.
func unitTable() map[string]float64 {
	out := map[string]float64{}
	for _, sym := range units.Symbols() {
		if u, err := units.Lookup(sym); err == nil {
			out[sym] = u.ToPa(1)
		}
	}
	return out
}

func (s *Server) handleUnits(w http.ResponseWriter, _ *http.Request) {
	w.Header().Set("Cache-Control", "max-age=3600") // fixed while the daemon runs
	writeJSON(w, http.StatusOK, unitTable())
}
