package api

import (
	"errors"
	"fmt"
	"io/fs"
	"net"
	"os"
	"syscall"
	"time"
)

// SocketMode is the unix socket's file mode: owner and group may call.
const SocketMode = 0o660

// ListenUnix listens on a unix socket at path with mode 0660. A socket file
// left by a daemon that died is replaced; a live one is an error, and so is
// any other kind of file at path.
func ListenUnix(path string) (net.Listener, error) {
	if fi, err := os.Lstat(path); err == nil {
		if fi.Mode().Type() != fs.ModeSocket {
			return nil, fmt.Errorf("listen on %s: a file that is not a socket is in the way", path)
		}
		c, err := net.DialTimeout("unix", path, time.Second)
		if err == nil {
			c.Close()
			return nil, fmt.Errorf("listen on %s: another daemon is already serving there", path)
		}
		if !errors.Is(err, syscall.ECONNREFUSED) {
			return nil, fmt.Errorf("listen on %s: cannot tell whether the old socket is in use: %w", path, err)
		}
		if err := os.Remove(path); err != nil {
			return nil, fmt.Errorf("listen on %s: remove stale socket: %w", path, err)
		}
	}
	l, err := net.Listen("unix", path)
	if err != nil {
		return nil, fmt.Errorf("listen on %s: %w", path, err)
	}
	if err := os.Chmod(path, SocketMode); err != nil {
		l.Close()
		return nil, fmt.Errorf("listen on %s: set mode %#o: %w", path, SocketMode, err)
	}
	return l, nil
}

// ListenTCP listens on addr (host:port). A loopback host gives Loopback
// trust. Any other host — including an empty one, which means every
// interface — needs allowRemote and a token, and gives Remote trust.
func ListenTCP(addr string, allowRemote bool, token string) (net.Listener, Access, error) {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return nil, 0, fmt.Errorf("listen on %q: want host:port, e.g. 127.0.0.1:8417: %w", addr, err)
	}
	access := Loopback
	if !isLoopback(host) {
		access = Remote
		if !allowRemote {
			return nil, 0, fmt.Errorf("listen on %s: not a loopback address; set listen.allow_remote to accept calls from the network", addr)
		}
		if token == "" {
			return nil, 0, fmt.Errorf("listen on %s: a token (listen.token_file) is required to listen beyond loopback", addr)
		}
	}
	l, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, 0, fmt.Errorf("listen on %s: %w", addr, err)
	}
	return l, access, nil
}

// isLoopback reports whether host names only this machine.
func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
