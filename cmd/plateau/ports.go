package main

import (
	"fmt"
	"path/filepath"
	"text/tabwriter"

	"github.com/spf13/cobra"
	"go.bug.st/serial/enumerator"
)

func init() { register(newPortsCmd) }

func newPortsCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "ports",
		Short: "List serial ports, with USB vendor and product ids where known",
		Long: `ports lists the serial ports of this machine. For USB adapters it shows the
vendor and product id and the serial number, and the stable /dev/serial/by-id
name to put in link.address: ttyUSB numbers change when an adapter is
re-plugged, the by-id name does not. Pseudo-terminals are not listed.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			// Active probing fills manufacturer and product strings for USB ports.
			ports, err := enumerator.GetDetailedPortsList(func(vid, pid string) bool { return true })
			if err != nil {
				return fmt.Errorf("list serial ports: %w", err)
			}
			out := cmd.OutOrStdout()
			if len(ports) == 0 {
				fmt.Fprintln(out, "no serial ports found (is the adapter plugged in, and are you in the dialout group?)")
				return nil
			}
			stable := byIDNames()
			w := tabwriter.NewWriter(out, 0, 4, 2, ' ', 0)
			fmt.Fprintln(w, "PORT\tUSB ID\tSERIAL\tDESCRIPTION\tSTABLE NAME")
			for _, p := range ports {
				id, desc := "", ""
				if p.IsUSB {
					id, desc = p.VID+":"+p.PID, join(p.Manufacturer, p.Product)
				}
				fmt.Fprintf(w, "%s\t%s\t%s\t%s\t%s\n", p.Name, orDash(id), orDash(p.SerialNumber), orDash(desc), orDash(stable[p.Name]))
			}
			return w.Flush()
		},
	}
}

// byIDNames maps /dev/ttyXXX to its /dev/serial/by-id link, where udev made one.
func byIDNames() map[string]string {
	m := map[string]string{}
	links, _ := filepath.Glob("/dev/serial/by-id/*")
	for _, l := range links {
		if dst, err := filepath.EvalSymlinks(l); err == nil {
			m[dst] = l
		}
	}
	return m
}

func join(a, b string) string {
	switch {
	case a == "":
		return b
	case b == "":
		return a
	}
	return a + " " + b
}
