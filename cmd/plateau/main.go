// Command plateau calibrates pressure gauges and transmitters by comparison
// with a reference standard. Each sub-command lives in its own file and only
// parses flags and wires packages together.
package main

import (
	"errors"
	"fmt"
	"log"
	"log/slog"
	"os"
	"strings"

	"github.com/spf13/cobra"
)

// version is set at build time with -ldflags "-X main.version=…".
var version = "dev"

// subcommands is filled by each command file's init, so adding a command
// never touches this file.
var subcommands []func() *cobra.Command

func register(f func() *cobra.Command) { subcommands = append(subcommands, f) }

// configPath is the persistent --config flag shared by every command.
var configPath string

func newRoot() *cobra.Command {
	root := &cobra.Command{
		Use:   "plateau",
		Short: "Unattended comparison calibration of pressure gauges and transmitters",
		Long: `plateau polls a reference standard and a device under test, captures a
comparison point each time both have settled, stores every sample in a bbolt
file and works out error, hysteresis, repeatability, linearity, uncertainty
and the conformity decision.`,
		Version:       version,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.PersistentFlags().StringVarP(&configPath, "config", "c", defaultConfigPath(),
		"configuration file (YAML); every key can also be set with PLATEAU_<KEY> environment variables")
	for _, f := range subcommands {
		root.AddCommand(f())
	}
	return root
}

// defaultConfigPath prefers systemd's configuration directory when set.
func defaultConfigPath() string {
	if d := os.Getenv("CONFIGURATION_DIRECTORY"); d != "" {
		return d + "/plateau.yaml"
	}
	return "plateau.yaml"
}

// libraryLog catches what libraries print with the standard log package (the
// serial back end of the Modbus RTU client reports a failed terminal restore
// on close that way) and passes it to libraryLogger at debug level, so it
// neither clutters a terminal nor is lost under `log.level: debug`.
type libraryLog struct{}

// libraryLogger is the daemon's logger once 'serve' has made it.
var libraryLogger = slog.New(slog.DiscardHandler)

func (libraryLog) Write(p []byte) (int, error) {
	libraryLogger.Debug(strings.TrimSpace(string(p)), "from", "library")
	return len(p), nil
}

func main() {
	log.SetFlags(0)
	log.SetOutput(libraryLog{})
	if err := newRoot().Execute(); err != nil {
		var st exitStatus
		if errors.As(err, &st) {
			os.Exit(st.code) // the command has said what it found
		}
		fmt.Fprintln(os.Stderr, "plateau:", err)
		os.Exit(1)
	}
}

// exitStatus ends the program with its code and no further message: the
// command has already printed what it found (check's status 2, say).
type exitStatus struct{ code int }

func (e exitStatus) Error() string { return fmt.Sprintf("exit status %d", e.code) }
