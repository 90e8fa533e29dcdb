package main

import (
	"bytes"
	"context"
	"io/fs"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"
)

// firstLook is the shell block of the README's "A first look" section.
func firstLook(t *testing.T, readme string) []string {
	t.Helper()
	text, err := os.ReadFile(readme)
	if err != nil {
		t.Fatal(err)
	}
	_, rest, ok := strings.Cut(string(text), "\n## A first look\n")
	if !ok {
		t.Fatal(`README.md has no "## A first look" section`)
	}
	_, rest, ok = strings.Cut(rest, "```sh\n")
	block, _, closed := strings.Cut(rest, "\n```")
	if !ok || !closed {
		t.Fatal(`"A first look" has no fenced sh block`)
	}
	comment := regexp.MustCompile(`\s+#.*$`)
	var lines []string
	for _, l := range strings.Split(block, "\n") {
		if l = strings.TrimSpace(comment.ReplaceAllString(l, "")); l != "" {
			lines = append(lines, l)
		}
	}
	return lines
}

// freshCopy copies the repository's files to dir, leaving out what a clone
// would not have (git's own files, stores, sockets, built programs).
func freshCopy(t *testing.T, root, dir string) {
	t.Helper()
	err := filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(root, p)
		name := d.Name()
		if d.IsDir() {
			if name == ".git" || strings.HasPrefix(name, "plateau-demo") || rel == "out" {
				return filepath.SkipDir
			}
			return os.MkdirAll(filepath.Join(dir, rel), 0o755)
		}
		if !d.Type().IsRegular() || rel == "plateau" || strings.HasSuffix(name, ".db") || strings.HasSuffix(name, ".sock") {
			return nil
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(dir, rel), b, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
}

// scientific finds a number in scientific notation, which no output meant
// for a person may hold.
var scientific = regexp.MustCompile(`\b\d+(\.\d+)?[eE][+-]?\d+\b`)

// Every command of "A first look" runs as typed on a fresh copy of the
// repository, in order: a line ending in & starts in the background (the
// next line is retried until that program is ready), and kill %N ends the
// N-th of them. No output of these commands holds scientific notation.
func TestFirstLookRunsAsWritten(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the program and runs two calibrations")
	}
	root, err := filepath.Abs("../..")
	if err != nil {
		t.Fatal(err)
	}
	lines := firstLook(t, filepath.Join(root, "README.md"))
	dir := t.TempDir()
	freshCopy(t, root, dir)

	type job struct {
		cmd  *exec.Cmd
		out  *bytes.Buffer
		done chan error
	}
	var jobs []*job
	defer func() {
		for _, j := range jobs {
			if j.cmd.ProcessState == nil {
				syscall.Kill(-j.cmd.Process.Pid, syscall.SIGKILL)
				<-j.done
			}
		}
	}()
	shell := func(ctx context.Context, line string) *exec.Cmd {
		c := exec.CommandContext(ctx, "sh", "-c", line)
		c.Dir = dir
		c.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
		return c
	}
	retry := false
	for _, line := range lines {
		if bg, ok := strings.CutSuffix(line, "&"); ok {
			var out bytes.Buffer
			// An interactive shell runs a job as its own process group of
			// that program: exec makes sh the program itself, so kill %N
			// signals the program and its exit status is the program's.
			c := shell(context.Background(), "exec "+strings.TrimSpace(bg))
			c.Stdout, c.Stderr = &out, &out
			if err := c.Start(); err != nil {
				t.Fatalf("%s: %v", line, err)
			}
			j := &job{cmd: c, out: &out, done: make(chan error, 1)}
			go func() { j.done <- c.Wait() }()
			jobs = append(jobs, j)
			retry = true
			continue
		}
		if n, ok := strings.CutPrefix(line, "kill %"); ok {
			i, err := strconv.Atoi(n)
			if err != nil || i < 1 || i > len(jobs) {
				t.Fatalf("%s: no such background job", line)
			}
			j := jobs[i-1]
			syscall.Kill(-j.cmd.Process.Pid, syscall.SIGTERM)
			select {
			case err := <-j.done:
				if err != nil {
					t.Errorf("%s: the background program ended with %v:\n%s", line, err, j.out)
				}
			case <-time.After(30 * time.Second):
				t.Fatalf("%s: still running 30 s after SIGTERM:\n%s", line, j.out)
			}
			checkHuman(t, line, j.out.String())
			continue
		}
		deadline := time.Now().Add(20 * time.Second)
		for {
			ctx, cancel := context.WithTimeout(context.Background(), 4*time.Minute)
			out, err := shell(ctx, line).CombinedOutput()
			cancel()
			if err == nil {
				checkHuman(t, line, string(out))
				break
			}
			if !retry || time.Now().After(deadline) {
				t.Fatalf("%s: %v\n%s", line, err, out)
			}
			time.Sleep(250 * time.Millisecond)
		}
		retry = false
	}
	for _, f := range []string{"demo", "first.html", "samples.csv", "copy.db"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Errorf("the block should have made %s: %v", f, err)
		}
	}
}

// checkHuman fails on scientific notation in a command's output, except in
// what is written for programs (JSON, CSV).
func checkHuman(t *testing.T, line, out string) {
	t.Helper()
	if strings.Contains(line, "--json") || strings.Contains(line, "go build") {
		return
	}
	for _, l := range strings.Split(out, "\n") {
		if m := scientific.FindString(l); m != "" {
			t.Errorf("%s: %q is in scientific notation in the line\n%s", line, m, l)
		}
	}
}
