package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"syscall"
	"time"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"
	"golang.org/x/term"

	"plateau/acquire"
	"plateau/acquire/store"
	"plateau/analysis/units"
	"plateau/config"
)

func init() { register(newRunCmd) }

func newRunCmd() *cobra.Command {
	var label string
	var quiet bool
	cmd := &cobra.Command{
		Use:   "run",
		Short: "Run the configured procedure in the foreground, with a progress bar",
		Long: `run loads the configuration, opens the store and the instruments (starting the
simulated rig when instruments use link kind "sim"), resumes an unfinished run
or starts a new one, shows progress, and prints the result table at the end.
It is the same engine that 'plateau serve' runs in the background. Ctrl-C
leaves the run resumable.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			cfg, err := config.Load(configPath)
			if err != nil {
				return err
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
			defer stop()
			if hasSource(cfg) {
				fmt.Fprintln(cmd.ErrOrStderr(), safetyNotice)
			}
			_, res, err := runOnce(ctx, cfg, label, cmd.ErrOrStderr(), !quiet)
			if err != nil {
				return err
			}
			return printResult(cmd.OutOrStdout(), res)
		},
	}
	cmd.Flags().StringVar(&label, "label", "", "a label for the run, e.g. the work order")
	cmd.Flags().BoolVarP(&quiet, "quiet", "q", false, "no progress bar")
	return cmd
}

// runOnce runs (or resumes) one calibration to its end and evaluates it.
func runOnce(ctx context.Context, cfg *config.Config, label string, progress io.Writer, showBar bool) (store.RunID, *runResult, error) {
	// The foreground run shows progress; the events are in the store and
	// 'plateau tail' is not needed here, so library logs stay quiet.
	log := slog.New(slog.DiscardHandler)
	b, err := openBench(ctx, cfg, log)
	if err != nil {
		return 0, nil, err
	}
	defer b.close()
	serveCtx, cancel := context.WithCancel(ctx)
	served := make(chan struct{})
	go func() { b.engine.Serve(serveCtx); close(served) }()
	defer func() { cancel(); <-served }()

	// Serve resumes an unfinished run by itself; give it a moment to do so.
	id, err := startOrResume(ctx, b.engine, label)
	if err != nil {
		return 0, nil, err
	}
	done := make(chan struct{})
	if showBar {
		go showProgress(ctx, b.engine, cfg.Device.Unit, progress, done)
	}
	state, reason := b.engine.Wait(ctx)
	close(done)
	if ctx.Err() != nil {
		return id, nil, fmt.Errorf("run %s interrupted; it resumes with the next 'plateau run' or 'plateau serve'", id)
	}
	if state != store.StateFinished {
		return id, nil, fmt.Errorf("run %s ended %s: %s", id, state, reason)
	}
	res, err := evaluate(b.store, id)
	return id, res, err
}

func startOrResume(ctx context.Context, eng *acquire.Engine, label string) (store.RunID, error) {
	deadline := time.Now().Add(2 * time.Second)
	for time.Now().Before(deadline) {
		if id, err := eng.Start(label); err == nil {
			return id, nil
		} else if errors.Is(err, acquire.ErrBusy) {
			// Serve resumed an unfinished run: follow that one.
			return store.ParseRunID(eng.Status().Run)
		}
		select {
		case <-ctx.Done():
			return 0, ctx.Err()
		case <-time.After(50 * time.Millisecond):
		}
	}
	return eng.Start(label)
}

// showProgress draws points done of total, the current step and target, and
// each instrument's settle state, on a terminal only.
func showProgress(ctx context.Context, eng *acquire.Engine, unit string, w io.Writer, done <-chan struct{}) {
	u, err := units.Lookup(unit)
	if err != nil {
		u = units.Pascal
	}
	st := eng.Status()
	opts := []progressbar.Option{
		progressbar.OptionSetWriter(w),
		progressbar.OptionShowCount(),
		progressbar.OptionSetWidth(24),
		progressbar.OptionThrottle(200 * time.Millisecond),
		progressbar.OptionClearOnFinish(),
	}
	if f, ok := w.(*os.File); !ok || !term.IsTerminal(int(f.Fd())) {
		return // a bar on a log file is noise; the events say the same
	}
	bar := progressbar.NewOptions(st.TotalPoints, opts...)
	tick := time.NewTicker(250 * time.Millisecond)
	defer tick.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-done:
			bar.Finish()
			return
		case <-tick.C:
			st := eng.Status()
			bar.Set(st.Points)
			settle := ""
			for _, in := range st.Instruments {
				mark := "settling"
				if in.Settled {
					mark = "settled"
				}
				settle += fmt.Sprintf(" · %s %s", in.Name, mark)
			}
			target := ""
			if st.Phase != "" {
				target = fmt.Sprintf(" → %.6g %s", u.FromPa(st.TargetPa), u.Symbol)
			}
			bar.Describe(fmt.Sprintf("%s%s%s", st.Phase, target, settle))
		}
	}
}
