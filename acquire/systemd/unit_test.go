package systemd

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

const unitPath = "../../systemd/plateau.service"

// TestUnitVerifies runs `systemd-analyze verify` (Debian package systemd)
// on the shipped unit. verify insists that ExecStart's binary exists, so a
// copy names this test's own binary instead of /usr/local/bin/plateau.
func TestUnitVerifies(t *testing.T) {
	analyze, err := exec.LookPath("systemd-analyze")
	if err != nil {
		if os.Getenv("CI") == "true" {
			t.Fatal("systemd-analyze not found; CI needs the Debian package systemd")
		}
		t.Skip("systemd-analyze not found (Debian package systemd)")
	}
	unit, err := os.ReadFile(unitPath)
	if err != nil {
		t.Fatal(err)
	}
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	text := string(unit)
	if !strings.Contains(text, "ExecStart=/usr/local/bin/plateau serve") {
		t.Fatal("ExecStart no longer names /usr/local/bin/plateau serve; update this test and the README")
	}
	dir := t.TempDir()
	copyPath := filepath.Join(dir, "plateau.service")
	if err := os.WriteFile(copyPath, []byte(strings.Replace(text, "ExecStart=/usr/local/bin/plateau", "ExecStart="+self, 1)), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(analyze, "verify", "--man=no", copyPath).CombinedOutput()
	if err != nil || len(strings.TrimSpace(string(out))) > 0 {
		t.Fatalf("systemd-analyze verify: %v\n%s", err, out)
	}
}

// TestUnitKeepsSerialAccess guards the directives that decide whether the
// daemon can open serial adapters at all, and the ones the daemon's own
// code relies on.
func TestUnitKeepsSerialAccess(t *testing.T) {
	unit, err := os.ReadFile(unitPath)
	if err != nil {
		t.Fatal(err)
	}
	lines := map[string]bool{}
	for _, l := range strings.Split(string(unit), "\n") {
		lines[strings.TrimSpace(l)] = true
	}
	for _, want := range []string{
		"Type=notify", "WatchdogSec=30s", "Restart=on-failure", "SupplementaryGroups=dialout",
		"DevicePolicy=closed", "DeviceAllow=char-ttyUSB rw", "DeviceAllow=char-ttyACM rw", "DeviceAllow=char-ttyS rw",
		"StateDirectory=plateau", "RuntimeDirectory=plateau", "ConfigurationDirectory=plateau",
		"ExecStart=/usr/local/bin/plateau serve --config /etc/plateau/plateau.yaml",
	} {
		if !lines[want] {
			t.Errorf("unit lacks %q", want)
		}
	}
	for l := range lines {
		// PrivateDevices hides physical devices; PrivateUsers maps dialout to nobody.
		if strings.HasPrefix(l, "PrivateDevices=") || strings.HasPrefix(l, "PrivateUsers=") {
			t.Errorf("unit sets %q, which cuts the daemon off from serial ports", l)
		}
	}
}
