package main

import (
	"fmt"
	"io"
	"log/slog"
	"os"

	"github.com/coreos/go-systemd/v22/journal"
	"golang.org/x/term"
)

// logSetup says how the daemon logs: level and format come from the
// configuration (log.level, log.format); whether stderr is a terminal or
// journald is found out.
type logSetup struct {
	Level    string // debug | info | warn | error
	Format   string // auto | text | json
	Terminal bool   // stderr is a terminal
	Journal  bool   // stderr is connected to journald
}

// newLogger builds the daemon's logger: readable text on a terminal, JSON
// when not a terminal or when asked. Under journald the time is left out,
// since the journal stamps every line itself.
func newLogger(w io.Writer, s logSetup) (*slog.Logger, error) {
	var level slog.Level
	if err := level.UnmarshalText([]byte(s.Level)); err != nil {
		return nil, fmt.Errorf("log.level %q: use debug, info, warn or error", s.Level)
	}
	opts := &slog.HandlerOptions{Level: level}
	if s.Journal {
		opts.ReplaceAttr = func(groups []string, a slog.Attr) slog.Attr {
			if len(groups) == 0 && a.Key == slog.TimeKey {
				return slog.Attr{}
			}
			return a
		}
	}
	switch s.Format {
	case "text":
		return slog.New(slog.NewTextHandler(w, opts)), nil
	case "json":
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	case "auto", "":
		if s.Terminal {
			return slog.New(slog.NewTextHandler(w, opts)), nil
		}
		return slog.New(slog.NewJSONHandler(w, opts)), nil
	}
	return nil, fmt.Errorf("log.format %q: use auto, text or json", s.Format)
}

// stderrSetup fills in what is known about this process's stderr.
func stderrSetup(level, format string) logSetup {
	journald, _ := journal.StderrIsJournalStream()
	return logSetup{Level: level, Format: format, Terminal: isTerminal(os.Stderr), Journal: journald}
}

func isTerminal(f *os.File) bool { return term.IsTerminal(int(f.Fd())) }
