package record

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"plateau/analysis/report"
	"plateau/config"
)

// withSection writes the example sim configuration with extra YAML
// appended, into a temporary directory.
func withSection(t *testing.T, extra string) string {
	t.Helper()
	b, err := os.ReadFile("../../testdata/config/sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "plateau.yaml")
	if err := os.WriteFile(path, append(b, []byte("\n"+extra)...), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// The certificate: section reaches the report's Info; the environment
// sets a field for one run; a bad date names its key.
func TestCertificateSection(t *testing.T) {
	path := withSection(t, "certificate:\n  number: C-2026-0311\n  customer: Example Works\n  date: 2026-03-02\n")
	t.Setenv("PLATEAU_CERTIFICATE_OPERATOR", "A. Tester")
	cfg, err := config.Load(path)
	if err != nil {
		t.Fatal(err)
	}
	want := report.Certificate{Number: "C-2026-0311", Customer: "Example Works", Operator: "A. Tester", Date: time.Date(2026, 3, 2, 0, 0, 0, 0, time.UTC)}
	if got := Info(cfg).Certificate; got != want {
		t.Errorf("Info's certificate = %+v, want %+v", got, want)
	}
	if got := Of(cfg).ReportInfo().Certificate; got != want {
		t.Errorf("the run record's certificate = %+v, want %+v", got, want)
	}

	_, err = config.Load(withSection(t, "certificate:\n  date: 2.3.2026\n"))
	if err == nil || !strings.Contains(err.Error(), "certificate.date") || !strings.Contains(err.Error(), "YYYY-MM-DD") {
		t.Errorf("a bad date gives %v, want a problem naming certificate.date", err)
	}
	_, err = config.Load(withSection(t, "certificate:\n  nummer: 1\n"))
	if err == nil || !strings.Contains(err.Error(), "number") {
		t.Errorf("a misspelt key gives %v, want a suggestion", err)
	}
}

// A pressure balance reference is named as one on the report, which then
// says its head is in the balance's budget.
func TestBalanceReferenceKind(t *testing.T) {
	cfg, err := config.Load("../../testdata/config/balance.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if k := Info(cfg).Reference.Kind; k != report.KindBalance {
		t.Errorf("reference kind %q, want %q", k, report.KindBalance)
	}
	cfg, err = config.Load("../../testdata/config/sim.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if k := Info(cfg).Reference.Kind; k != "" {
		t.Errorf("an indicating reference has kind %q", k)
	}
}
