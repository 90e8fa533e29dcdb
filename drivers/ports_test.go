package drivers

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func TestClaimPortOneOwner(t *testing.T) {
	dir := t.TempDir()
	dev := filepath.Join(dir, "ttyUSB0")
	if err := os.WriteFile(dev, nil, 0o600); err != nil {
		t.Fatal(err)
	}
	byID := filepath.Join(dir, "usb-FTDI_FT232R-if00-port0")
	if err := os.Symlink(dev, byID); err != nil {
		t.Fatal(err)
	}
	release, err := ClaimPort(byID, "line instrument \"ref\"")
	if err != nil {
		t.Fatal(err)
	}
	for _, name := range []string{byID, dev} { // the same device under either name
		if _, err := ClaimPort(name, "Modbus RTU link"); err == nil || !strings.Contains(err.Error(), `line instrument "ref"`) {
			t.Errorf("second claim of %s: %v, want an error naming the owner", name, err)
		}
	}
	other, err := ClaimPort(filepath.Join(dir, "ttyUSB1"), "line instrument \"dut\"")
	if err != nil {
		t.Errorf("another port: %v", err)
	} else {
		other()
	}
	release()
	release() // harmless
	again, err := ClaimPort(dev, "Modbus RTU link")
	if err != nil {
		t.Fatalf("after release: %v", err)
	}
	again()
}
