package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"os"
	"os/signal"
	"strings"
	"syscall"
	"time"

	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"
	"golang.org/x/term"

	"plateau/acquire"
	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/config"
)

func init() { register(newRunCmd) }

func newRunCmd() *cobra.Command {
	var label, output string
	var quiet bool
	var cert acquire.CertificateFields
	cmd := &cobra.Command{
		Use:   "run",
		Short: "Run the configured procedure in the foreground, with a progress bar",
		Long: `run loads the configuration, opens the store and the instruments (starting the
simulated rig when instruments use link kind "sim"), resumes an unfinished run
or starts a new one, shows progress, and prints the result table at the end.
It is the same engine that 'plateau serve' runs in the background. Ctrl-C
leaves the run resumable.

When the device under test is a dial read by a person (link kind manual), run
asks for each reading in the terminal: "set 4 bar, read the dial:". Type the
value (4.05, 4,05 or -0.1, with a unit if it is not the device's), check it,
and press Enter to take it, or type the right value over it first. A reading
outside the dial's range or far from the step's target is taken only when
you confirm it.

With several devices under test the result opens with a table of every
device (largest error, verdict, missed readings), then gives each device's
table; with several dials each prompt names the dial to read.

With -o the report is written at the end, in the format of the file's
extension (.html, .txt, .csv, .json): one file with every device.`,
		Example: `  plateau run
  plateau run --label WO-1182 -o WO-1182.html`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			format := ""
			if output != "" {
				f, err := reportFormat("", output)
				if err != nil {
					return err
				}
				format = f
			}
			cfg, err := config.Load(configPath)
			if err != nil {
				return err
			}
			ctx, stop := signal.NotifyContext(cmd.Context(), os.Interrupt, syscall.SIGTERM)
			defer stop()
			if hasSource(cfg) {
				fmt.Fprintln(cmd.ErrOrStderr(), safetyNotice)
			}
			view := runView{progress: cmd.ErrOrStderr(), bar: !quiet, input: cmd.InOrStdin(), cert: cert}
			id, res, err := runForeground(ctx, cfg, label, view)
			if err != nil {
				return err
			}
			if err := printResult(cmd.OutOrStdout(), res); err != nil {
				return err
			}
			if output == "" {
				return nil
			}
			if err := writeWhole(output, func(w io.Writer) error { return renderReport(w, format, res) }); err != nil {
				return fmt.Errorf("run %s finished, but its report: %w (write it again with: plateau report %s -o %s)", id, err, id, output)
			}
			fmt.Fprintf(cmd.ErrOrStderr(), "wrote %s\n", output)
			return nil
		},
	}
	cmd.Flags().StringVar(&label, "label", "", "a label for the run, e.g. the work order")
	cmd.Flags().BoolVarP(&quiet, "quiet", "q", false, "no progress bar")
	addCertificateFlags(cmd, &cert)
	cmd.Flags().StringVarP(&output, "output", "o", "", "write the report to this file at the end (.html, .txt, .csv or .json)")
	return cmd
}

// runView is how a foreground run talks to the person at the bench.
type runView struct {
	progress io.Writer // the progress bar and the dial prompts
	bar      bool
	input    io.Reader                 // dial readings typed by the operator; nil: none
	cert     acquire.CertificateFields // a new run's own certificate fields
}

// runOnce runs (or resumes) one calibration to its end and evaluates it,
// every device under test.
func runOnce(ctx context.Context, cfg *config.Config, label string, progress io.Writer, showBar bool) (store.RunID, *runResult, error) {
	return runForeground(ctx, cfg, label, runView{progress: progress, bar: showBar})
}

// runForeground is runOnce with the operator's terminal: progress, and
// the dial prompts when the device under test is read by a person.
func runForeground(ctx context.Context, cfg *config.Config, label string, view runView) (store.RunID, *runResult, error) {
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
	id, resumed, err := startOrResume(ctx, b.engine, label, view.cert)
	if err != nil {
		return 0, nil, err
	}
	if resumed {
		st := b.engine.Status()
		if st.Steps > 0 {
			fmt.Fprintf(view.progress, "resuming %s at step %d of %d\n", id, st.Step+1, st.Steps)
		} else {
			fmt.Fprintf(view.progress, "resuming the free run %s\n", id)
		}
	}
	show, _ := displayFor(cfg.Device, "")
	speed := 1.0
	if b.rig != nil && cfg.Simulator.Speed > 0 {
		speed = cfg.Simulator.Speed
	}
	if least, most, ok := runLength(cfg); ok {
		fmt.Fprintf(view.progress, "run %s: %d steps, at least %s and at most %s (reaching each pressure comes on top)\n", id,
			b.engine.Status().Steps, roundDuration(time.Duration(float64(least)/speed)), roundDuration(time.Duration(float64(most)/speed)))
	}
	watchCtx, stopWatch := context.WithCancel(ctx)
	watched := make(chan struct{})
	w := &runWatch{eng: b.engine, out: view.progress, show: show, speed: speed}
	if view.bar {
		w.bar = newBar(view.progress, b.engine.Status().TotalPoints)
	}
	if view.input != nil && readByPerson(cfg, b) {
		w.prompt = &dialPrompt{bench: b.engine, lines: readLines(view.input), out: view.progress, show: show, poll: 200 * time.Millisecond}
		if bal := cfg.ReferenceBalance(); bal != nil {
			w.prompt.loading = func(targetPa float64) string {
				if s := plannedStep(cfg, bal, &api.StepNow{TargetPa: targetPa}, show.unit); s.planned != "" {
					return s.hint()
				}
				return ""
			}
		}
	}
	go func() { w.follow(watchCtx); close(watched) }()
	state, reason := b.engine.Wait(ctx)
	stopWatch()
	<-watched
	if ctx.Err() != nil {
		return id, nil, fmt.Errorf("run %s interrupted; it resumes with the next 'plateau run' or 'plateau serve'", id)
	}
	if state != store.StateFinished {
		return id, nil, fmt.Errorf("run %s ended %s: %s", id, state, reason)
	}
	res, err := evaluateAll(b.store, id)
	return id, res, err
}

// readByPerson says whether a device under test is a dial the person at
// this terminal reads (not the simulator's own operator).
func readByPerson(cfg *config.Config, b *bench) bool {
	kind := map[string]string{}
	for _, d := range cfg.Devices {
		kind[d.Instrument] = d.Device.Kind
	}
	for _, in := range cfg.Instruments {
		if in.Role != config.RoleDevice {
			continue
		}
		k, ok := kind[in.Name]
		if !ok {
			k = cfg.Device.Kind
		}
		simulated := b.rig != nil && b.rig.DialReader() != nil && in.Link.Kind == config.LinkManual
		if !simulated && (in.Link.Kind == config.LinkManual || k == "dial") {
			return true
		}
	}
	return false
}

// startOrResume starts a run, or follows the unfinished one Serve resumed
// (resumed true).
func startOrResume(ctx context.Context, eng *acquire.Engine, label string, cert acquire.CertificateFields) (id store.RunID, resumed bool, err error) {
	deadline := time.Now().Add(2 * time.Second)
	for time.Now().Before(deadline) {
		if id, err := eng.StartWith(label, cert); err == nil {
			return id, false, nil
		} else if errors.Is(err, acquire.ErrBusy) {
			// Serve resumed an unfinished run: follow that one.
			id, err := store.ParseRunID(eng.Status().Run)
			return id, err == nil, err
		}
		select {
		case <-ctx.Done():
			return 0, false, ctx.Err()
		case <-time.After(50 * time.Millisecond):
		}
	}
	id, err = eng.StartWith(label, cert)
	return id, false, err
}

// runWatch follows a foreground run: the progress bar, and the dial
// prompt whenever the device under test waits for a reading.
type runWatch struct {
	eng    *acquire.Engine
	out    io.Writer
	show   display
	speed  float64                  // how much faster than the wall the run's clock goes
	bar    *progressbar.ProgressBar // nil: no bar
	prompt *dialPrompt              // nil: nobody types readings here
	// answered is the wait last answered (dial and what it waited for):
	// not asked again while it lasts, unless it lasts past reaskAfter.
	answered   string
	answeredAt time.Time
}

// reaskAfter is how long after an answer a dial may still show the same
// wait before it is asked again: far longer than a step takes to pick an
// entry up (its next look at the dial), so that one answer is never asked
// twice.
const reaskAfter = 5 * time.Second

func (w *runWatch) follow(ctx context.Context) {
	tick := time.NewTicker(250 * time.Millisecond)
	defer tick.Stop()
	defer func() {
		if w.bar != nil {
			w.bar.Finish()
		}
	}()
	for {
		select {
		case <-ctx.Done():
			return
		case <-tick.C:
		}
		st := w.eng.Status()
		name, what, target, ok := waiting(st)
		key := name + ": " + what
		switch {
		case !ok || key != w.answered:
			w.answered = ""
		case time.Since(w.answeredAt) > reaskAfter:
			// Still waiting for the same long after the answer: the step
			// asks again (the reference was not steady when the dial was
			// read, say), and the gap between the two asks fell between
			// two looks at the status.
			fmt.Fprintf(w.out, "\n%s asks again for %s ('plateau tail' says why)", name, what)
			w.answered = ""
		}
		if ok && w.prompt != nil && w.answered == "" {
			if w.bar != nil {
				w.bar.Clear()
			}
			err := w.prompt.ask(ctx, name, what, target)
			if errors.Is(err, errInputClosed) {
				fmt.Fprintf(w.out, "\n%v; the run waits for each reading until its timeout\n", err)
				w.prompt = nil
			}
			// The step takes the reading at its next poll: until then it
			// still shows as waiting, and must not be asked twice (a second
			// entry would supersede the first).
			w.answered, w.answeredAt = key, time.Now()
			continue
		}
		if w.bar != nil {
			w.bar.Set(st.Points)
			w.bar.Describe(progressLine(st, w.show, w.speed))
		}
	}
}

// newBar is a progress bar of captured points, on a terminal only: a bar on
// a log file is noise, and the events say the same.
func newBar(out io.Writer, total int) *progressbar.ProgressBar {
	if f, ok := out.(*os.File); !ok || !term.IsTerminal(int(f.Fd())) {
		return nil
	}
	return progressbar.NewOptions(total,
		progressbar.OptionSetWriter(out),
		progressbar.OptionShowCount(),
		progressbar.OptionSetWidth(24),
		progressbar.OptionThrottle(200*time.Millisecond),
		progressbar.OptionClearOnFinish(),
	)
}

// progressLine is the bar's description: the step, its target, what each
// instrument still waits for, and the wall time the step and the run still
// need (the engine's estimate is clock time, faster on a simulated bench).
func progressLine(st acquire.Status, show display, speed float64) string {
	var b strings.Builder
	b.WriteString(st.Phase)
	if st.Phase != "" {
		fmt.Fprintf(&b, " → %s", show.withUnit(st.TargetPa))
	}
	for _, in := range st.Instruments {
		switch {
		case in.Waiting != "":
			fmt.Fprintf(&b, " · %s waits for a dial reading", in.Name)
		case in.Settled:
			fmt.Fprintf(&b, " · %s settled", in.Name)
		case in.Why != "":
			fmt.Fprintf(&b, " · %s %s", in.Name, in.Why)
		default:
			fmt.Fprintf(&b, " · %s settling", in.Name)
		}
	}
	if st.Estimated {
		wall := func(d time.Duration) time.Duration { return time.Duration(float64(d) / speed) }
		fmt.Fprintf(&b, " · step ~%s, run ~%s left", roundDuration(wall(st.StepLeft)), roundDuration(wall(st.RunLeft)))
	}
	return b.String()
}
