package api

import (
	"context"
	"errors"
	"fmt"
	"io"
	"net/http"
	"strconv"
	"time"
)

// backupper writes a consistent copy of the whole store (one read
// transaction); *store.Store has it.
type backupper interface {
	Backup(w io.Writer) (int64, error)
}

// Trailers of a backup reply: the copy's size, or why it broke off after
// the status line was sent.
const (
	backupBytesTrailer = "Plateau-Backup-Bytes"
	backupErrorTrailer = "Plateau-Backup-Error"
)

// backupWriteTimeout bounds the wait for the caller to take each part of
// the copy; the whole copy may take as long as it needs.
const backupWriteTimeout = 30 * time.Second

// handleBackup streams a consistent copy of the store while runs go on.
func (s *Server) handleBackup(w http.ResponseWriter, r *http.Request) {
	b, ok := s.o.Records.(backupper)
	if !ok {
		writeProblem(w, http.StatusNotImplemented, "this daemon's store cannot be copied while it runs")
		return
	}
	rc := http.NewResponseController(w)
	h := w.Header()
	h.Set("Content-Type", "application/octet-stream")
	h.Set("Content-Disposition", `attachment; filename="plateau-backup.db"`)
	h.Set("Trailer", backupBytesTrailer+", "+backupErrorTrailer)
	w.WriteHeader(http.StatusOK)
	n, err := b.Backup(&deadlineWriter{w: w, rc: rc})
	if err != nil {
		s.log.Warn("backup broke off", "bytes", n, "err", err)
		h.Set(backupErrorTrailer, err.Error())
		return
	}
	h.Set(backupBytesTrailer, strconv.FormatInt(n, 10))
}

// deadlineWriter renews the write deadline before each write, so a large
// copy is not cut by the server's overall write timeout.
type deadlineWriter struct {
	w  io.Writer
	rc *http.ResponseController
}

func (d *deadlineWriter) Write(p []byte) (int, error) {
	d.rc.SetWriteDeadline(time.Now().Add(backupWriteTimeout))
	return d.w.Write(p)
}

// Backup copies the daemon's store to w while it runs and returns the
// number of bytes. The copy is complete only when it returns nil.
func (c *Client) Backup(ctx context.Context, w io.Writer) (int64, error) {
	req, err := c.newRequest(ctx, http.MethodGet, "/api/v1/backup", nil)
	if err != nil {
		return 0, err
	}
	resp, err := c.send(req)
	if err != nil {
		return 0, err
	}
	defer resp.Body.Close()
	n, err := io.Copy(w, resp.Body)
	if err != nil {
		return n, fmt.Errorf("backup: copy broke off after %d bytes: %w", n, err)
	}
	// The trailers are read with the end of the body.
	if msg := resp.Trailer.Get(backupErrorTrailer); msg != "" {
		return n, fmt.Errorf("backup: the daemon broke off the copy after %d bytes: %s", n, msg)
	}
	want, err := strconv.ParseInt(resp.Trailer.Get(backupBytesTrailer), 10, 64)
	if err != nil {
		return n, errors.New("backup: the daemon did not confirm the copy was complete")
	}
	if want != n {
		return n, fmt.Errorf("backup: received %d bytes of %d", n, want)
	}
	return n, nil
}
