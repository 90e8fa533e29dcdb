package drivers

import (
	"fmt"
	"path/filepath"
	"sync"
)

// ports records the serial devices this process has open, so that a port
// never gets two owners: a line instrument and a Modbus RTU link, or two
// line instruments, on one device would interleave their bytes on the wire.
var ports = struct {
	mu sync.Mutex
	m  map[string]string // resolved device path → who holds it
}{m: map[string]string{}}

// ClaimPort marks a serial device as owned by owner (a phrase for messages:
// "line instrument ref"). The same device under another name — a
// /dev/serial/by-id link and the /dev/ttyUSB0 it points to — is the same
// claim. A device already claimed is an error naming its owner. The release
// function frees the claim; calling it again is harmless.
func ClaimPort(device, owner string) (release func(), err error) {
	key := device
	if p, err := filepath.EvalSymlinks(device); err == nil {
		key = p
	}
	ports.mu.Lock()
	defer ports.mu.Unlock()
	if by, taken := ports.m[key]; taken {
		return nil, fmt.Errorf("serial port %s is already in use by %s: one port has one owner (put instruments that share an RS-485 line on one Modbus RTU link)", device, by)
	}
	ports.m[key] = owner
	var once sync.Once
	return func() {
		once.Do(func() {
			ports.mu.Lock()
			delete(ports.m, key)
			ports.mu.Unlock()
		})
	}, nil
}
