package main

import (
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"os"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
	"plateau/acquire/store"
)

func init() { register(newTailCmd) }

func newTailCmd() *cobra.Command {
	var (
		asJSON bool
		runArg string
		level  string
		lines  int
		since  int64
		retry  bool
		color  string
	)
	cmd := &cobra.Command{
		Use:   "tail",
		Short: "Follow the daemon's event log live, like tail -f",
		Long: `tail prints the last events and then follows new ones as the daemon commits
them: one line per event with its time, level, run, instrument and message.
When the connection drops (the daemon restarts, an SSH tunnel breaks) it
reconnects by itself and carries on from the last event it printed, so
nothing is shown twice or skipped; if the daemon no longer has some events a
line says how many were missed. Ctrl-C ends it.`,
		Example: `  plateau tail
  plateau tail --run r000042 --level warn
  plateau tail --json | jq .message`,
		Args: cobra.NoArgs,
	}
	df := addDaemonFlags(cmd)
	fl := cmd.Flags()
	fl.BoolVar(&asJSON, "json", false, "one JSON object per line, for programs")
	fl.StringVar(&runArg, "run", "", "only events of this run (r000042 or 42)")
	fl.StringVar(&level, "level", "debug", "only events at this level or above: debug, info, warn, error")
	fl.IntVarP(&lines, "lines", "n", 10, "how many past events to show first")
	fl.Int64Var(&since, "since", -1, "start after this event id instead of with the last --lines events")
	fl.BoolVar(&retry, "retry", false, "keep trying when the daemon cannot be reached at first")
	fl.StringVar(&color, "color", "auto", "colour the output: auto (only on a terminal), always or never")
	cmd.RunE = func(cmd *cobra.Command, _ []string) error {
		var f eventFilter
		if err := f.minLevel.UnmarshalText([]byte(level)); err != nil {
			return fmt.Errorf("--level %q: use debug, info, warn or error", level)
		}
		if runArg != "" {
			id, err := store.ParseRunID(runArg)
			if err != nil {
				return fmt.Errorf("--run: %w", err)
			}
			f.run = id
		}
		out := cmd.OutOrStdout()
		useColor, err := wantColor(color, out)
		if err != nil {
			return err
		}
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		p := &eventPrinter{w: out, json: asJSON, color: useColor}
		opts := api.FollowOptions{Tail: lines, Retry: retry,
			OnGap: func(first, last uint64) { p.gap(first, last) },
			OnRestart: func(seen, now uint64) {
				fmt.Fprintf(cmd.ErrOrStderr(), "plateau tail: the daemon's event log starts again at id %d (last seen %d): its store was replaced\n", now, seen)
			},
			OnDisconnect: func(err error, wait time.Duration) {
				fmt.Fprintf(cmd.ErrOrStderr(), "plateau tail: %v; reconnecting in %v\n", err, wait.Round(time.Millisecond))
			},
		}
		if since >= 0 {
			opts.Resume, opts.After = true, uint64(since)
		}
		err = c.Follow(cmd.Context(), opts, func(ev store.Event) error {
			if f.keep(ev) {
				return p.print(ev)
			}
			return nil
		})
		if cmd.Context().Err() != nil {
			return nil // Ctrl-C
		}
		return err
	}
	return cmd
}

func wantColor(mode string, w io.Writer) (bool, error) {
	switch mode {
	case "always":
		return true, nil
	case "never":
		return false, nil
	case "auto":
		f, ok := w.(*os.File)
		return ok && isTerminal(f) && os.Getenv("NO_COLOR") == "", nil
	}
	return false, fmt.Errorf("--color %q: use auto, always or never", mode)
}

// eventFilter keeps the events asked for; it runs after gap detection, so
// filtered events never read as missed ones.
type eventFilter struct {
	run      store.RunID
	minLevel slog.Level
}

func (f eventFilter) keep(ev store.Event) bool {
	return ev.Level >= f.minLevel && (f.run == 0 || ev.Run == f.run)
}

// eventPrinter writes one line per event.
type eventPrinter struct {
	w     io.Writer
	json  bool
	color bool
}

const (
	ansiReset  = "\x1b[0m"
	ansiDim    = "\x1b[2m"
	ansiRed    = "\x1b[31m"
	ansiYellow = "\x1b[33m"
	ansiCyan   = "\x1b[36m"
	ansiBold   = "\x1b[1m"
)

func (p *eventPrinter) paint(code, s string) string {
	if !p.color {
		return s
	}
	return code + s + ansiReset
}

func (p *eventPrinter) print(ev store.Event) error {
	if p.json {
		b, err := json.Marshal(ev)
		if err != nil {
			return err
		}
		_, err = fmt.Fprintf(p.w, "%s\n", b)
		return err
	}
	lvl := fmt.Sprintf("%-5s", ev.Level.String())
	switch {
	case ev.Level >= slog.LevelError:
		lvl = p.paint(ansiBold+ansiRed, lvl)
	case ev.Level >= slog.LevelWarn:
		lvl = p.paint(ansiYellow, lvl)
	case ev.Level < slog.LevelInfo:
		lvl = p.paint(ansiDim, lvl)
	}
	run := "-"
	if ev.Run != 0 {
		run = ev.Run.String()
	}
	inst := ev.Instrument
	if inst == "" {
		inst = "-"
	}
	// Messages are one line each; a stray newline must not forge a line.
	msg := strings.NewReplacer("\n", " ", "\r", " ").Replace(ev.Message)
	_, err := fmt.Fprintf(p.w, "%s %s %s %-10s %s\n",
		p.paint(ansiDim, ev.Time.Local().Format("2006-01-02 15:04:05.000")), lvl, run, p.paint(ansiCyan, inst), msg)
	return err
}

func (p *eventPrinter) gap(first, last uint64) {
	n := last - first + 1
	line := fmt.Sprintf("… %d events missed (ids %d–%d)", n, first, last)
	if p.json {
		b, _ := json.Marshal(map[string]any{"missed": n, "first_id": first, "last_id": last})
		line = string(b)
	}
	fmt.Fprintln(p.w, p.paint(ansiYellow, line))
}
