package main

import (
	"fmt"
	"runtime"
	"runtime/debug"

	"github.com/spf13/cobra"
)

func init() { register(newVersionCmd) }

func newVersionCmd() *cobra.Command {
	return &cobra.Command{
		Use:   "version",
		Short: "Print the version of plateau and what it was built from",
		Long: `version prints the same version as --version, then the Go release it was
built with and, when the build recorded it, the source revision — what a
calibration record or a bug report should quote.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			out := cmd.OutOrStdout()
			fmt.Fprintf(out, "plateau version %s\n", version)
			fmt.Fprintf(out, "  go        %s %s/%s\n", runtime.Version(), runtime.GOOS, runtime.GOARCH)
			if bi, ok := debug.ReadBuildInfo(); ok {
				settings := map[string]string{}
				for _, s := range bi.Settings {
					settings[s.Key] = s.Value
				}
				if rev := settings["vcs.revision"]; rev != "" {
					if settings["vcs.modified"] == "true" {
						rev += " (with uncommitted changes)"
					}
					fmt.Fprintf(out, "  revision  %s\n", rev)
				}
				if t := settings["vcs.time"]; t != "" {
					fmt.Fprintf(out, "  committed %s\n", t)
				}
			}
			return nil
		},
	}
}
