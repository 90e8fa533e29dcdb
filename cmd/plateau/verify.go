package main

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"plateau/acquire/store"
	"plateau/config"
)

func init() {
	register(newVerifyCmd)
	register(newBackupCmd)
}

// storePath is the store named by --store, or else by the configuration.
func storePath(flag string) (string, error) {
	if flag != "" {
		return flag, nil
	}
	cfg, err := config.Load(configPath)
	if err != nil {
		return "", err
	}
	return cfg.Store.Path, nil
}

func newVerifyCmd() *cobra.Command {
	var path string
	cmd := &cobra.Command{
		Use:   "verify",
		Short: "Check the store file for damage, e.g. after a power cut",
		Long: `verify runs bbolt's consistency check over every page of the store and lists
what it finds, then counts the runs, their points and any run left
unfinished. The daemon holds the file while it runs: stop it first, or use
'plateau backup' and verify the copy.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			p, err := storePath(path)
			if err != nil {
				return err
			}
			if _, err := os.Stat(p); err != nil {
				return fmt.Errorf("verify: %w", err)
			}
			st, err := store.Open(p, store.Options{})
			if err != nil {
				return fmt.Errorf("verify: %w", err)
			}
			defer st.Close()
			if err := st.Check(); err != nil {
				return err
			}
			runs, err := st.Runs()
			if err != nil {
				return fmt.Errorf("verify: %w", err)
			}
			points, open := 0, 0
			for _, r := range runs {
				pts, err := st.Points(r.ID)
				if err != nil {
					return fmt.Errorf("verify: run %s: %w", r.ID, err)
				}
				points += len(pts)
				if !r.State.Terminal() {
					open++
				}
			}
			fmt.Fprintf(cmd.OutOrStdout(), "%s: OK — %d runs, %d points, %d unfinished\n", p, len(runs), points, open)
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "the store file (default: store.path of the configuration)")
	return cmd
}

func newBackupCmd() *cobra.Command {
	var path string
	cmd := &cobra.Command{
		Use:   "backup FILE",
		Short: "Write a consistent copy of the store to FILE",
		Long: `backup copies the store in one read transaction, so the copy is consistent
even while runs are being written. It refuses to overwrite an existing file.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			p, err := storePath(path)
			if err != nil {
				return err
			}
			st, err := store.Open(p, store.Options{})
			if err != nil {
				return fmt.Errorf("backup: %w", err)
			}
			defer st.Close()
			out := args[0]
			f, err := os.OpenFile(out, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
			if err != nil {
				return fmt.Errorf("backup: %w", err)
			}
			n, err := st.Backup(f)
			if cerr := f.Close(); err == nil {
				err = cerr
			}
			if err != nil {
				os.Remove(out)
				return fmt.Errorf("backup to %s: %w", out, err)
			}
			abs, _ := filepath.Abs(out)
			fmt.Fprintf(cmd.OutOrStdout(), "wrote %s (%d bytes)\n", abs, n)
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "the store file (default: store.path of the configuration)")
	return cmd
}
