package main

import (
	"bytes"
	"log/slog"
	"strings"
	"testing"
	"time"

	"plateau/acquire/store"
)

func TestTailLines(t *testing.T) {
	at := time.Date(2026, 3, 1, 8, 15, 2, 123e6, time.Local)
	ev := store.Event{ID: 7, Time: at, Run: 42, Level: slog.LevelWarn, Instrument: "ref", Type: "missed", Message: "cycle 1 up point 3: not settled\nforged line"}
	cases := []struct {
		name  string
		p     eventPrinter
		want  string
		avoid string
	}{
		{"text", eventPrinter{}, "2026-03-01 08:15:02.123 WARN  r000042 ref        cycle 1 up point 3: not settled forged line\n", "\x1b["},
		{"colour", eventPrinter{color: true}, "\x1b[33mWARN \x1b[0m", ""},
		{"json", eventPrinter{json: true}, `"message":"cycle 1 up point 3: not settled\nforged line"`, "\x1b["},
	}
	for _, c := range cases {
		var buf bytes.Buffer
		c.p.w = &buf
		if err := c.p.print(ev); err != nil {
			t.Fatal(err)
		}
		got := buf.String()
		if !strings.Contains(got, c.want) || (c.avoid != "" && strings.Contains(got, c.avoid)) {
			t.Errorf("%s: %q, want %q", c.name, got, c.want)
		}
		if strings.Count(got, "\n") != 1 {
			t.Errorf("%s: %d lines for one event", c.name, strings.Count(got, "\n"))
		}
	}
	var buf bytes.Buffer
	(&eventPrinter{w: &buf}).gap(12, 20)
	if got := buf.String(); got != "… 9 events missed (ids 12–20)\n" {
		t.Errorf("gap line %q", got)
	}
	if c, err := wantColor("auto", &buf); c || err != nil {
		t.Errorf("colour on a buffer: %v %v", c, err)
	}
	if _, err := wantColor("rainbow", &buf); err == nil {
		t.Error("bad --color accepted")
	}
}

func TestTailFilter(t *testing.T) {
	f := eventFilter{run: 3, minLevel: slog.LevelWarn}
	cases := []struct {
		ev   store.Event
		keep bool
	}{
		{store.Event{Run: 3, Level: slog.LevelError}, true},
		{store.Event{Run: 3, Level: slog.LevelWarn}, true},
		{store.Event{Run: 3, Level: slog.LevelInfo}, false},
		{store.Event{Run: 4, Level: slog.LevelError}, false},
		{store.Event{Run: 0, Level: slog.LevelError}, false},
	}
	for _, c := range cases {
		if got := f.keep(c.ev); got != c.keep {
			t.Errorf("%+v: keep %v, want %v", c.ev, got, c.keep)
		}
	}
}
