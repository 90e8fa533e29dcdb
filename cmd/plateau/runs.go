package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
	"plateau/acquire/store"
	"plateau/analysis"
	"plateau/analysis/readout"
	"plateau/analysis/report"
	"plateau/analysis/units"
	"plateau/config"
)

func init() { register(newRunsCmd) }

func newRunsCmd() *cobra.Command {
	var asJSON bool
	var unit string
	cmd := &cobra.Command{
		Use:   "runs [RUN]",
		Short: "List the runs in the store, or show one run and its points",
		Long: `runs lists every stored run, oldest first. With a run id (r000042, 42 or
"last") it shows that run and its captured points. It asks the daemon when one
answers, and otherwise reads the store file itself (read-only), so results
stay at hand with the daemon stopped.`,
		Example: `  plateau runs
  plateau runs last
  plateau runs r000042 --unit psi`,
		Args: cobra.MaximumNArgs(1),
	}
	rf := addRecordFlags(cmd)
	cmd.Flags().BoolVar(&asJSON, "json", false, "print JSON (full precision)")
	cmd.Flags().StringVar(&unit, "unit", "", "show pressures in this unit (default: the device's)")
	cmd.RunE = func(cmd *cobra.Command, args []string) error {
		src, err := rf.open(cmd)
		if err != nil {
			return err
		}
		defer src.Close()
		ctx, out := cmd.Context(), cmd.OutOrStdout()
		if len(args) == 0 {
			runs, err := src.Runs(ctx)
			if err != nil {
				return err
			}
			listed := make([]listedRun, len(runs))
			for i, r := range runs {
				listed[i].RunInfo = r
				if d, err := src.Run(ctx, r.ID); err == nil {
					listed[i].Devices = runDevices(d)
				}
			}
			if asJSON {
				return printJSON(out, listed)
			}
			printRuns(out, listed)
			return nil
		}
		run, err := src.Run(ctx, args[0])
		if err != nil {
			return err
		}
		pts, err := src.Points(ctx, run.ID)
		if err != nil {
			return err
		}
		if asJSON {
			return printJSON(out, map[string]any{"run": run, "devices": runDevices(run), "points": pts})
		}
		show, err := runDisplay(run, unit)
		if err != nil {
			return err
		}
		printRun(out, run, pts, show)
		return nil
	}
	return cmd
}

// recordFlags find the runs: the daemon's flags, and the store file used
// when no daemon answers.
type recordFlags struct {
	daemon *daemonFlags
	store  string
}

func addRecordFlags(cmd *cobra.Command) *recordFlags {
	f := &recordFlags{daemon: addDaemonFlags(cmd)}
	cmd.Flags().StringVar(&f.store, "store", "", "read this store file when no daemon answers (default: store.path of the configuration)")
	return f
}

// runSource is where stored runs are read from: the daemon, or the store
// file when no daemon answers.
type runSource interface {
	Runs(ctx context.Context) ([]api.RunInfo, error)
	Run(ctx context.Context, id string) (api.RunDetail, error)
	Points(ctx context.Context, id string) ([]analysis.Point, error)
	// Report writes the report of device ("" for every device).
	Report(ctx context.Context, id, format, device string, w io.Writer) error
	Close() error
}

// open asks the daemon first; when nothing answers there it opens the
// store read-only. A daemon that answers with an error is not bypassed.
func (f *recordFlags) open(cmd *cobra.Command) (runSource, error) {
	c, err := f.daemon.client(cmd)
	if err == nil {
		_, err = c.Status(cmd.Context())
		if err == nil {
			return daemonSource{c}, nil
		}
		var refused *api.Error
		if errors.As(err, &refused) || cmd.Context().Err() != nil {
			return nil, err
		}
	}
	reach := err
	p, err := existingStore("read the store", f.store)
	if err != nil {
		return nil, fmt.Errorf("no daemon answers (%v) and %w", reach, err)
	}
	// A read-only open shares the file with other readers but waits for
	// a daemon that holds it: the short timeout says so instead.
	st, err := store.Open(p, store.Options{ReadOnly: true, Timeout: 2 * time.Second})
	if err != nil {
		return nil, fmt.Errorf("no daemon answers (%v); reading %s directly: %w", reach, p, err)
	}
	return storeSource{st}, nil
}

type daemonSource struct{ *api.Client }

func (daemonSource) Close() error { return nil }

// Report asks the daemon for the whole run's report as JSON, evaluated
// there from the run's frozen record, and renders it here: in text, or
// for one device, which the daemon's report call cannot be asked for.
func (d daemonSource) Report(ctx context.Context, id, format, device string, w io.Writer) error {
	var doc bytes.Buffer
	if err := d.Client.Report(ctx, id, "json", &doc); err != nil {
		return err
	}
	ds, err := report.ReadJSON(&doc)
	if err != nil {
		return fmt.Errorf("report %s from the daemon: %w", id, err)
	}
	r := &runResult{Devices: ds}
	if r.ID, err = store.ParseRunID(ds[0].Info.Run.ID); err != nil {
		return fmt.Errorf("report %s from the daemon: %w", id, err)
	}
	one, err := r.only(device)
	if err != nil {
		return err
	}
	return renderReport(w, format, one)
}

// storeSource reads runs from an open store file.
type storeSource struct{ st *store.Store }

func (s storeSource) Close() error { return s.st.Close() }

func (s storeSource) Runs(context.Context) ([]api.RunInfo, error) {
	runs, err := s.st.Runs()
	if err != nil {
		return nil, err
	}
	out := make([]api.RunInfo, len(runs))
	for i, r := range runs {
		out[i] = api.Info(r)
	}
	return out, nil
}

func (s storeSource) id(raw string) (store.RunID, error) {
	if raw != "last" {
		return store.ParseRunID(raw)
	}
	runs, err := s.st.Runs()
	if err != nil {
		return 0, err
	}
	if len(runs) == 0 {
		return 0, fmt.Errorf("run last: there are no runs yet in %s", s.st.Path())
	}
	return runs[len(runs)-1].ID, nil
}

func (s storeSource) Run(_ context.Context, raw string) (api.RunDetail, error) {
	id, err := s.id(raw)
	if err != nil {
		return api.RunDetail{}, err
	}
	r, err := s.st.Run(id)
	if err != nil {
		return api.RunDetail{}, err
	}
	pts, err := s.st.Points(id)
	if err != nil {
		return api.RunDetail{}, err
	}
	return api.RunDetail{RunInfo: api.Info(r), Points: len(pts), Config: string(r.Config)}, nil
}

func (s storeSource) Points(_ context.Context, raw string) ([]analysis.Point, error) {
	id, err := s.id(raw)
	if err != nil {
		return nil, err
	}
	return s.st.Points(id)
}

func (s storeSource) Report(_ context.Context, raw, format, device string, w io.Writer) error {
	id, err := s.id(raw)
	if err != nil {
		return err
	}
	all, err := evaluateAll(s.st, id)
	if err != nil {
		return err
	}
	one, err := all.only(device)
	if err != nil {
		return err
	}
	return renderReport(w, format, one)
}

// display writes pressures in one unit with the digits of the device's
// resolution.
type display struct {
	unit units.Unit
	res  float64 // Pa; 0 when unknown
}

func (d display) one(pa float64) string    { return readout.Pressure(pa, d.unit, d.res) }
func (d display) mean(pa float64) string   { return readout.Mean(pa, d.unit, d.res) }
func (d display) signed(pa float64) string { return readout.Signed(pa, d.unit, d.res) }
func (d display) withUnit(pa float64) string {
	return readout.WithUnit(pa, d.unit, d.res)
}

// displayFor is the display of a configured device, or of override
// (--unit) when given.
func displayFor(dev config.Device, override string) (display, error) {
	d := display{unit: displayUnit(dev.Unit), res: dev.ResolutionPa}
	if override != "" {
		u, err := units.Lookup(override)
		if err != nil {
			return display{}, fmt.Errorf("--unit: %w", err)
		}
		d.unit = u
	}
	return d, nil
}

// runDisplay is the display of a run's device, from the configuration
// kept with the run.
func runDisplay(r api.RunDetail, override string) (display, error) {
	var dev config.Device
	if r.Config != "" {
		if cfg, err := config.Parse([]byte(r.Config), "configuration kept with run "+r.ID); err == nil {
			dev = cfg.Device
		}
	}
	return displayFor(dev, override)
}

const timeLayout = "2006-01-02 15:04"

// listedRun is a run in the list, with the devices it calibrated.
type listedRun struct {
	api.RunInfo
	Devices []runDevice `json:"devices,omitempty"`
}

// runDevice is one device under test of a run: the instrument's name
// (empty when the run has one device) and the device's identity number.
type runDevice struct {
	Name string `json:"name,omitempty"`
	ID   string `json:"id,omitempty"`
}

func (d runDevice) String() string {
	switch {
	case d.Name == "" && d.ID == "":
		return "—"
	case d.Name == "":
		return d.ID
	case d.ID == "":
		return d.Name
	}
	return d.Name + " (" + d.ID + ")"
}

// runDevices are the devices a run calibrated, from the configuration
// kept with it; nil when it kept none.
func runDevices(r api.RunDetail) []runDevice {
	if r.Config == "" {
		return nil
	}
	cfg, err := config.Parse([]byte(r.Config), "configuration kept with run "+r.ID)
	if err != nil {
		return nil
	}
	if len(cfg.Devices) < 2 {
		return []runDevice{{ID: cfg.Device.ID}}
	}
	out := make([]runDevice, len(cfg.Devices))
	for i, d := range cfg.Devices {
		out[i] = runDevice{Name: d.Instrument, ID: d.Device.ID}
	}
	return out
}

// devicesColumn names a run's devices in the list: the one device's
// identity, or the instruments of several (the first few, and how many).
func devicesColumn(ds []runDevice) string {
	switch len(ds) {
	case 0:
		return "—"
	case 1:
		return ds[0].String()
	}
	names := make([]string, 0, 4)
	for _, d := range ds[:min(len(ds), 3)] {
		names = append(names, d.Name)
	}
	if len(ds) > 3 {
		names = append(names, "…")
	}
	return fmt.Sprintf("%d: %s", len(ds), strings.Join(names, ", "))
}

func printRuns(w io.Writer, runs []listedRun) {
	if len(runs) == 0 {
		fmt.Fprintln(w, "no runs yet; start one with: plateau start")
		return
	}
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "RUN\tSTATE\tCREATED\tLAST CHANGE\tDEVICES\tLABEL\tREASON")
	for _, r := range runs {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\n", r.ID, r.State, r.Created.Local().Format(timeLayout),
			r.Updated.Local().Format(timeLayout), devicesColumn(r.Devices), r.Label, r.Reason)
	}
	tw.Flush()
}

func printRun(w io.Writer, r api.RunDetail, pts []analysis.Point, show display) {
	fmt.Fprintf(w, "run       %s %q\nstate     %s%s\ncreated   %s\nchanged   %s\npoints    %d\n",
		r.ID, r.Label, r.State, prefixed(": ", r.Reason), r.Created.Local().Format(time.RFC3339), r.Updated.Local().Format(time.RFC3339), r.Points)
	devs := runDevices(r)
	if len(devs) > 0 {
		names := make([]string, len(devs))
		for i, d := range devs {
			names[i] = d.String()
		}
		label := "device"
		if len(devs) > 1 {
			label = "devices"
		}
		fmt.Fprintf(w, "%-9s %s\n", label, strings.Join(names, ", "))
	}
	if len(pts) == 0 {
		return
	}
	several := false
	for _, p := range pts {
		several = several || p.Device != ""
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', tabwriter.AlignRight)
	if several {
		fmt.Fprint(tw, "INSTRUMENT\t")
	}
	fmt.Fprintf(tw, "CYCLE\tSERIES\tKIND\tNOMINAL %[1]s\tREFERENCE %[1]s\tDEVICE %[1]s\tDEVICE − REF %[1]s\t\n", show.unit.Symbol)
	for _, p := range pts {
		if several {
			fmt.Fprintf(tw, "%s\t", p.Device)
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\t%s\t%s\t\n", p.Cycle, p.Direction, p.Kind,
			show.one(p.Nominal), show.mean(p.Reference.Mean), show.mean(p.DUT.Mean), show.signed(p.DUT.Mean-p.Reference.Mean))
	}
	tw.Flush()
}
