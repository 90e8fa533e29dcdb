package main

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"sort"
	"strings"
	"text/tabwriter"
	"time"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
	"plateau/analysis/readout"
	"plateau/analysis/units"
	"plateau/config"
)

func init() { register(newStatusCmd) }

// defaultSocket is where the daemon listens under systemd.
const defaultSocket = "/run/plateau/plateau.sock"

// daemonFlags are the flags of every command that calls the daemon.
type daemonFlags struct {
	socket, url, tokenFile string
}

func addDaemonFlags(cmd *cobra.Command) *daemonFlags {
	f := &daemonFlags{}
	fl := cmd.Flags()
	fl.StringVar(&f.socket, "socket", "", "the daemon's unix socket (default: listen.socket from the config, else "+defaultSocket+"; env PLATEAU_SOCKET)")
	fl.StringVar(&f.url, "url", "", "call the daemon over TCP instead, e.g. http://127.0.0.1:8417 (env PLATEAU_URL)")
	fl.StringVar(&f.tokenFile, "token-file", "", "file holding the bearer token for TCP calls (default: listen.token_file; env PLATEAU_TOKEN holds the token itself)")
	return f
}

// client finds the daemon: flags first, then the environment, then the
// configuration file's listen section, then the systemd default socket.
// A config file that was named explicitly must load; the default one may
// be absent or unreadable (a user following a run need not read it).
func (f *daemonFlags) client(cmd *cobra.Command) (*api.Client, error) {
	socket := firstNonEmpty(f.socket, os.Getenv("PLATEAU_SOCKET"))
	url := firstNonEmpty(f.url, os.Getenv("PLATEAU_URL"))
	tokenFile := f.tokenFile
	var listen config.Listen
	if cfg, err := config.Load(configPath); err == nil {
		listen = cfg.Listen
	} else if cmd.Flags().Changed("config") {
		return nil, err
	}
	token := os.Getenv("PLATEAU_TOKEN")
	if tokenFile == "" && token == "" {
		tokenFile = listen.TokenFile
	}
	if tokenFile != "" {
		t, err := api.LoadToken(tokenFile)
		if err != nil {
			return nil, err
		}
		token = t
	}
	switch {
	case url != "":
		return api.NewTCPClient(url, token)
	case socket != "":
		return api.NewUnixClient(socket, ""), nil
	case listen.Socket != "":
		return api.NewUnixClient(listen.Socket, ""), nil
	case listen.TCP != "":
		return api.NewTCPClient("http://"+listen.TCP, token)
	}
	return api.NewUnixClient(defaultSocket, ""), nil
}

func firstNonEmpty(s ...string) string {
	for _, v := range s {
		if v != "" {
			return v
		}
	}
	return ""
}

func newStatusCmd() *cobra.Command {
	var asJSON bool
	var unit string
	cmd := &cobra.Command{
		Use:   "status",
		Short: "Show the daemon, the current run and every instrument",
		Args:  cobra.NoArgs,
	}
	df := addDaemonFlags(cmd)
	cmd.Flags().BoolVar(&asJSON, "json", false, "print the status as JSON")
	cmd.RunE = func(cmd *cobra.Command, _ []string) error {
		c, err := df.client(cmd)
		if err != nil {
			return err
		}
		st, err := c.Status(cmd.Context())
		if err != nil {
			return err
		}
		if asJSON {
			return printJSON(cmd.OutOrStdout(), st)
		}
		show, err := statusDisplay(st.Unit, unit)
		if err != nil {
			return err
		}
		printStatusLoading(cmd.OutOrStdout(), st, show, time.Now(), balanceHint(st.Current, show.unit))
		return nil
	}
	cmd.Flags().StringVar(&unit, "unit", "", "show pressures in this unit (default: the device's)")
	return cmd
}

// statusDisplay shows the daemon's unit with the resolution of the local
// configuration's device when that is the same device unit; a reading is
// otherwise shown to six significant digits.
func statusDisplay(daemonUnit, override string) (display, error) {
	var dev config.Device
	if cfg, err := config.Load(configPath); err == nil && cfg.Device.Unit == daemonUnit {
		dev = cfg.Device
	}
	dev.Unit = daemonUnit
	return displayFor(dev, override)
}

func printJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// balanceHint is what to load on the local configuration's pressure
// balance for the current step ("load P1+M1+M2 (≈ 8.000 bar)"), or "" with
// no balance, no plan of loadings or no step.
func balanceHint(cur *api.StepNow, u units.Unit) string {
	if cur == nil || cur.Phase == "" {
		return ""
	}
	cfg, err := config.Load(configPath)
	if err != nil {
		return ""
	}
	b := cfg.ReferenceBalance()
	if b == nil {
		return ""
	}
	if s := plannedStep(cfg, b, cur, u); s.planned != "" {
		return s.hint()
	}
	return ""
}

func printStatus(w io.Writer, st api.Status, show display, now time.Time) {
	printStatusLoading(w, st, show, now, "")
}

// printStatusLoading is printStatus with the balance's loading for the
// step (balanceHint) on the progress line.
func printStatusLoading(w io.Writer, st api.Status, show display, now time.Time, load string) {
	fmt.Fprintf(w, "daemon    plateau %s, up %s\n", st.Version, now.Sub(st.Since).Round(time.Second))
	if st.Run == nil {
		fmt.Fprintln(w, "run       none (idle)")
		if l := st.Last; l != nil {
			fmt.Fprintf(w, "last run  %s %s%s\n", l.ID, l.State, prefixed(": ", l.Reason))
			if l.Verdict != "" {
				note := ""
				if l.State != "finished" {
					note = " — on the points captured before the run " + l.State + "; the calibration is incomplete"
				}
				fmt.Fprintf(w, "verdict   %s%s\n", strings.ToUpper(l.Verdict), note)
			}
		}
		if st.ExpectedSeconds > 0 {
			fmt.Fprintf(w, "a run     %d steps, %s\n", len(st.Plan), expectedText(st))
		}
	} else {
		r := st.Run
		label := ""
		if r.Label != "" {
			label = fmt.Sprintf(" %q", r.Label)
		}
		state := st.State
		if state == "" {
			state = string(r.State)
		}
		fmt.Fprintf(w, "run       %s%s %s%s%s\n", r.ID, label, state, sinceText(st.StateSince, now), prefixed(": ", st.Reason))
		// Step already reads "step 3 of 29, …": no label of its own.
		fmt.Fprintf(w, "progress  %.0f %%%s%s\n", 100*st.Progress, prefixed(" — ", st.Step), prefixed(" · ", load))
		if cur := st.Current; cur != nil && cur.Phase != "" {
			fmt.Fprintf(w, "target    %s%s\n", show.withUnit(cur.TargetPa), settleText(st.Settle, show))
		}
		if cur := st.Current; cur != nil && cur.Estimated {
			fmt.Fprintf(w, "left      this step ~%s, the run ~%s (the plan, scaled by how long the steps so far took)\n",
				roundDuration(seconds(cur.StepLeftSeconds)), roundDuration(seconds(cur.RunLeftSeconds)))
		}
		for _, in := range st.Instruments {
			switch {
			case in.Waiting != "":
				fmt.Fprintf(w, "waiting   %s: a dial reading for %s (plateau enter VALUE)\n", instrumentName(in), in.Waiting)
			case st.Current != nil && st.Current.Phase != "" && !in.Settled && in.Why != "" && in.Role != config.RoleSource:
				fmt.Fprintf(w, "waiting   %s: %s\n", instrumentName(in), in.Why)
			}
		}
	}
	if st.Trip != "" {
		fmt.Fprintf(w, "SAFETY    tripped: %s — no setpoint is sent until a person resumes or starts a run\n", st.Trip)
	}
	if st.StoreFault != "" {
		fmt.Fprintf(w, "STORE     cannot write: %s\n", st.StoreFault)
	}
	fmt.Fprintf(w, "points    %d captured since the daemon started; last event %d\n", st.PointsCaptured, st.LastEventID)
	if len(st.Instruments) == 0 {
		return
	}
	fmt.Fprintln(w)
	tw := tabwriter.NewWriter(w, 0, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "INSTRUMENT\tROLE\tSTATE\tLAST READING\tSETTLED\tREADS\tFAILED")
	for _, in := range st.Instruments {
		state := "up"
		if !in.Up {
			state = "DOWN"
		}
		last := "—"
		if in.LastAt.IsZero() && in.Role == api.RoleAmbient && in.Why != "" {
			last = in.Why // read by a person, nothing entered yet
		}
		if !in.LastAt.IsZero() {
			when := fmt.Sprintf("%s ago", now.Sub(in.LastAt).Round(time.Second))
			if in.LastAt.After(now) { // a simulated bench runs its clock ahead
				when = "at " + in.LastAt.Local().Format("15:04:05")
			}
			last = fmt.Sprintf("%s (%s)", lastReading(in, show), when)
		}
		settled := "no"
		if in.Settled {
			settled = "yes"
		}
		role := in.Role
		if in.Quantity != "" {
			role += " (" + in.Quantity + ")"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%d\t%s\n", instrumentName(in), role, state, last, settled, in.Reads, failures(in.Errors))
		if in.LastError != "" {
			fmt.Fprintf(tw, "\t\t\t└ %s\t\t\t\n", in.LastError)
		}
	}
	tw.Flush()
}

// lastReading is an instrument's last good reading: a pressure in the
// display's unit, an ambient instrument's in its own (°C, %RH, hPa) as
// it gave it.
func lastReading(in api.InstrumentInfo, show display) string {
	if in.Role == api.RoleAmbient && in.RawUnit != "" {
		return readout.Ambient(in.Raw, in.RawUnit)
	}
	return show.withUnit(in.LastPa)
}

// instrumentName is an instrument's name, with the identity of the device
// under test it reads: "dut (PG-0421)".
func instrumentName(in api.InstrumentInfo) string {
	if in.Device != "" && in.Device != in.Name {
		return in.Name + " (" + in.Device + ")"
	}
	return in.Name
}

// sinceText says since when a run has been in its state, as the time of
// day (the acquisition clock's, as tail shows it) and how long ago.
func sinceText(at, now time.Time) string {
	if at.IsZero() {
		return ""
	}
	s := " since " + at.Local().Format("15:04:05")
	if ago := now.Sub(at); ago >= time.Second {
		s += " (" + roundDuration(ago) + " ago)"
	}
	return s
}

// settleText is the settle rule a step waits for.
func settleText(r *api.SettleRule, show display) string {
	if r == nil || r.WindowSeconds <= 0 {
		return ""
	}
	mean := func(pa float64) string { return show.mean(pa) + " " + show.unit.Symbol }
	s := fmt.Sprintf("; settled when steady over %s: drift within %s/min, scatter within %s", roundDuration(seconds(r.WindowSeconds)),
		mean(60*r.MaxDriftPaPerS), mean(r.MaxSpreadPa))
	if r.BandPa > 0 {
		s += ", mean within " + mean(r.BandPa) + " of the target"
	}
	return s
}

// expectedText is how long a whole run takes by its plan.
func expectedText(st api.Status) string {
	return fmt.Sprintf("at least %s, at most %s (reaching each pressure comes on top)",
		roundDuration(seconds(st.ExpectedSeconds)), roundDuration(seconds(st.ExpectedMostSeconds)))
}

func seconds(s float64) time.Duration { return time.Duration(s * float64(time.Second)) }

// displayUnit is the device's unit, or kPa when it has none or is unknown.
func displayUnit(symbol string) units.Unit {
	if u, err := units.Lookup(symbol); err == nil {
		return u
	}
	u, _ := units.Lookup("kPa")
	return u
}

func failures(m map[string]uint64) string {
	if len(m) == 0 {
		return "0"
	}
	kinds := make([]string, 0, len(m))
	for k := range m {
		kinds = append(kinds, k)
	}
	sort.Strings(kinds)
	parts := make([]string, len(kinds))
	for i, k := range kinds {
		parts[i] = fmt.Sprintf("%s %d", k, m[k])
	}
	return strings.Join(parts, ", ")
}
