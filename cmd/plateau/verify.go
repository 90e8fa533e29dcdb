package main

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"plateau/acquire/api"
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
	var df *daemonFlags
	cmd := &cobra.Command{
		Use:   "verify",
		Short: "Check the store file for damage, e.g. after a power cut (reads only)",
		Long: `verify opens the store read-only and reads all of it: the meta pages, the
file size against the pages in use, every page of the tree, bbolt's own
consistency check, and every run, point, event and sample block against its
checksum. It writes nothing, creates nothing and refuses an empty file or one
that is not a plateau store, so it can check a read-only copy. While the
daemon runs it holds the file: verify then checks a consistent copy the
daemon makes (in the temporary directory, removed afterwards); --store reads
a file directly. When verify finds damage, 'plateau salvage' copies out what
can still be read.`,
		Args: cobra.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			if c, err := df.client(cmd); err == nil && path == "" {
				if _, err := c.Status(cmd.Context()); err == nil {
					return verifyThroughDaemon(cmd, c)
				}
			}
			p, err := existingStore("verify", path)
			if err != nil {
				return err
			}
			sum, err := verifyFile(p)
			if err != nil {
				return err
			}
			fmt.Fprintf(cmd.OutOrStdout(), "%s: OK — %s\n", p, sum)
			return nil
		},
	}
	cmd.Flags().StringVar(&path, "store", "", "the store file, read directly (default: ask the daemon, else store.path of the configuration)")
	df = addDaemonFlags(cmd)
	return cmd
}

// verifyFile reads all of the store file p and says what it holds.
func verifyFile(p string) (string, error) {
	st, err := store.Open(p, store.Options{ReadOnly: true, StartCheck: store.CheckPagesOnly})
	if err != nil {
		return "", fmt.Errorf("verify: %w", err)
	}
	defer st.Close()
	if err := st.Check(); err != nil {
		return "", fmt.Errorf("verify: %w; copy out what can be read with: %s", err, store.SalvageHint(p))
	}
	runs, err := st.Runs()
	if err != nil {
		return "", fmt.Errorf("verify: %w", err)
	}
	points, open := 0, 0
	for _, r := range runs {
		pts, err := st.Points(r.ID)
		if err != nil {
			return "", fmt.Errorf("verify: run %s: %w", r.ID, err)
		}
		points += len(pts)
		if !r.State.Terminal() {
			open++
		}
	}
	return fmt.Sprintf("%s, %s, %d unfinished", counted(len(runs), "run"), counted(points, "point"), open), nil
}

// verifyThroughDaemon checks a consistent copy of the store the running
// daemon makes, in the temporary directory, and removes it.
func verifyThroughDaemon(cmd *cobra.Command, c *api.Client) error {
	dir, err := os.MkdirTemp("", "plateau-verify-")
	if err != nil {
		return fmt.Errorf("verify: %w", err)
	}
	defer os.RemoveAll(dir)
	copyPath := filepath.Join(dir, "copy.db")
	f, err := os.OpenFile(copyPath, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return fmt.Errorf("verify: %w", err)
	}
	_, err = c.Backup(cmd.Context(), f)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("verify: a copy from the running daemon: %w", err)
	}
	sum, err := verifyFile(copyPath)
	if err != nil {
		return fmt.Errorf("the running daemon's consistent copy of its store is damaged (%v): stop the daemon, then verify and salvage the file itself", err)
	}
	fmt.Fprintf(cmd.OutOrStdout(), "the running daemon's store: OK — %s (checked in a consistent copy it made)\n", sum)
	return nil
}

// existingStore is the store file of --store (or the configuration) for a
// command that only reads it: a path that does not name an existing regular
// file is refused before anything opens it (opening would create it).
func existingStore(verb, flag string) (string, error) {
	p, err := storePath(flag)
	if err != nil {
		return "", err
	}
	fi, err := os.Stat(p)
	if err != nil {
		return "", fmt.Errorf("%s: %w", verb, err)
	}
	if !fi.Mode().IsRegular() {
		return "", fmt.Errorf("%s: %s is not a regular file", verb, p)
	}
	return p, nil
}

func newBackupCmd() *cobra.Command {
	var path string
	var df *daemonFlags
	cmd := &cobra.Command{
		Use:   "backup FILE",
		Short: "Write a consistent copy of the store to FILE",
		Long: `backup copies the store in one read transaction, so the copy is consistent
even while runs are being written. With a daemon running it asks the daemon
for the copy (the daemon holds the file); otherwise it reads the file itself.
It refuses to overwrite an existing file.`,
		Args: cobra.ExactArgs(1),
		RunE: func(cmd *cobra.Command, args []string) error {
			if c, err := df.client(cmd); err == nil && path == "" {
				if _, err := c.Status(cmd.Context()); err == nil {
					return backupFromDaemon(cmd, c, args[0])
				}
			}
			p, err := existingStore("backup", path)
			if err != nil {
				return err
			}
			st, err := store.Open(p, store.Options{ReadOnly: true})
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
	cmd.Flags().StringVar(&path, "store", "", "the store file, read directly (default: ask the daemon, else store.path of the configuration)")
	df = addDaemonFlags(cmd)
	return cmd
}

// backupFromDaemon streams the daemon's consistent copy into a new file,
// whole or not at all.
func backupFromDaemon(cmd *cobra.Command, c *api.Client, out string) error {
	f, err := os.OpenFile(out, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return fmt.Errorf("backup: %w", err)
	}
	n, err := c.Backup(cmd.Context(), f)
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		os.Remove(out)
		return fmt.Errorf("backup to %s through the daemon: %w", out, err)
	}
	abs, _ := filepath.Abs(out)
	fmt.Fprintf(cmd.OutOrStdout(), "wrote %s (%d bytes, a consistent copy from the running daemon)\n", abs, n)
	return nil
}

// counted is n with its noun, plural unless n is one: "1 run", "2 runs".
func counted[N int | int64 | uint64](n N, noun string) string {
	if n == 1 {
		return fmt.Sprintf("1 %s", noun)
	}
	return fmt.Sprintf("%d %ss", n, noun)
}
