package main

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"
)

func TestNewLogger(t *testing.T) {
	cases := []struct {
		name     string
		setup    logSetup
		wantJSON bool
		wantTime bool
		err      string
	}{
		{"terminal auto is text", logSetup{Level: "info", Format: "auto", Terminal: true}, false, true, ""},
		{"pipe auto is JSON", logSetup{Level: "info", Format: "auto"}, true, true, ""},
		{"asked for JSON on a terminal", logSetup{Level: "info", Format: "json", Terminal: true}, true, true, ""},
		{"asked for text off a terminal", logSetup{Level: "debug", Format: "text"}, false, true, ""},
		{"journald drops the time", logSetup{Level: "info", Format: "auto", Journal: true}, true, false, ""},
		{"bad level", logSetup{Level: "loud", Format: "auto"}, false, false, `log.level "loud"`},
		{"bad format", logSetup{Level: "info", Format: "xml"}, false, false, `log.format "xml"`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var buf bytes.Buffer
			log, err := newLogger(&buf, c.setup)
			if c.err != "" {
				if err == nil || !strings.Contains(err.Error(), c.err) {
					t.Fatalf("err %v, want %q", err, c.err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			log.Info("run started", "run", "r000001")
			line := buf.String()
			var m map[string]any
			isJSON := json.Unmarshal([]byte(line), &m) == nil
			if isJSON != c.wantJSON {
				t.Fatalf("JSON = %v, want %v: %q", isJSON, c.wantJSON, line)
			}
			if hasTime := strings.Contains(line, "time"); hasTime != c.wantTime {
				t.Fatalf("time present = %v, want %v: %q", hasTime, c.wantTime, line)
			}
			if !strings.Contains(line, "r000001") {
				t.Fatalf("attribute lost: %q", line)
			}
		})
	}
}
