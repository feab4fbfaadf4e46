package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/drivers/serialline/linetest"
)

// `kermalux read --json` through a real pseudo-terminal against a fake
// meter speaking the Veltrane KR-40 protocol of testdata/profiles: a reading
// printed in mR/s arrives in µGy/s with 1 mR = 8.764 µGy (1 R = 2.58e-4
// C/kg, NIST SP 811 B.9; W/e = 33.97 J/C), and an over-range reply is
// reported as such, never as a valid reading.
func TestReadJSONOverPty(t *testing.T) {
	replies := []string{"RD +1.0000E-02 mR/s OK", "RD +5.0000E+02 uGy/s OVR"}
	n := 0
	d := linetest.New(t, "veltrane-KR40-1187", '\r', func(d *linetest.Device, cmd string) {
		switch cmd {
		case "ID?":
			d.Send("VELTRANE KR-40 SN=KR40-1187 FW=2.3\r\n")
		case "REMOTE", "UNIT UGY/S":
			d.Send("OK\r\n")
		case "RD?":
			d.Send(replies[n%len(replies)] + "\r\n")
			n++
		}
	})
	resetFlags(root)
	var out, errb bytes.Buffer
	code := execute([]string{"read", "--profile", "../../testdata/profiles/veltrane-kr40.yaml", "--port", d.Link(), "--count", "2", "--json"}, &out, &errb)
	if code != exitOK {
		t.Fatalf("exit %d\nstdout: %s\nstderr: %s", code, out.String(), errb.String())
	}
	var got []readingJSON
	sc := bufio.NewScanner(&out)
	for sc.Scan() {
		var r readingJSON
		if json.Unmarshal(sc.Bytes(), &r) == nil && r.Raw != "" {
			got = append(got, r)
		}
	}
	if len(got) != 2 {
		t.Fatalf("%d readings, want 2:\n%s", len(got), out.String())
	}
	want := 0.01e-3 * 2.58e-4 * 33.97 * 1e6 // 0.01 mR/s in R/s × Gy/R, in µGy/s
	if r := got[0]; r.Status != "ok" || r.Unit != "µGy/s" || r.Value == nil || math.Abs(*r.Value-want) > 1e-9 || r.RawUnit != "mR/s" {
		t.Errorf("first reading %+v, want %.6g µGy/s from 0.01 mR/s", r, want)
	}
	if r := got[1]; r.Status != "over_range" {
		t.Errorf("second reading status %q, want over_range", r.Status)
	}
}

// scpiFake is a small SCPI dosimeter on a pseudo-terminal for read's
// tests: *IDN?, the default set-up, UNIT:KRAT?, READ? and an error queue
// (IEEE 488.2: an unknown header queues -113 and sends nothing).
type scpiFake struct {
	mu     sync.Mutex
	reads  []string // READ? replies in turn (the last repeats)
	n      int
	queue  []string
	noUnit bool
	mute   bool
	read   chan struct{} // when set, told of each READ? that gets a reply
}

func (f *scpiFake) handle(d *linetest.Device, cmd string) {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.mute {
		return
	}
	switch cmd {
	case "*IDN?":
		d.Send("ONDRAKEL,DX-2,DX2-30417,1.08\n")
	case "*RST", "*CLS", "CONF:KRAT":
	case "UNIT:KRAT?":
		if f.noUnit {
			f.queue = append(f.queue, `-113,"Undefined header"`)
			return
		}
		d.Send("MR/S\n")
	case "READ?":
		r := f.reads[min(f.n, len(f.reads)-1)]
		f.n++
		if r == "-113" { // the reading spoilt by a queued error
			f.queue = append(f.queue, `-113,"Undefined header"`)
			r = "1.0E-02"
		}
		d.Send(r + "\n")
		if f.read != nil {
			select {
			case f.read <- struct{}{}:
			default:
			}
		}
	case "SYST:ERR?":
		if len(f.queue) == 0 {
			d.Send("0,\"No error\"\n")
			return
		}
		d.Send(f.queue[0] + "\n")
		f.queue = f.queue[1:]
	default:
		f.queue = append(f.queue, `-113,"Undefined header"`)
	}
}

type readRun struct {
	code        int
	out, stderr string
}

func runReadCmd(t *testing.T, args ...string) readRun {
	t.Helper()
	resetFlags(root)
	var out, errb bytes.Buffer
	code := execute(append([]string{"read"}, args...), &out, &errb)
	return readRun{code, out.String(), errb.String()}
}

// checkLogShape: every line read writes on standard error is one
// structured log line that starts with its time (issue: plain lines with
// no time were mixed in, so an error could not be matched to a reading).
func checkLogShape(t *testing.T, stderr string) {
	t.Helper()
	for _, l := range strings.Split(strings.TrimSpace(stderr), "\n") {
		if l == "" {
			continue
		}
		if !strings.HasPrefix(l, "time=") || !strings.Contains(l, " level=") {
			t.Errorf("stderr line without time and level: %q", l)
		}
	}
}

func jsonReadings(t *testing.T, out string) []readingJSON {
	var got []readingJSON
	for _, l := range strings.Split(out, "\n") {
		var r readingJSON
		if json.Unmarshal([]byte(l), &r) == nil && r.Raw != "" {
			got = append(got, r)
		}
	}
	return got
}

// What the meter reports sets the exit status: a queued error and SCPI's
// not-a-number are exit 1 (the help says so); over range is shown with no
// value (9.9E37 mR/s is never converted) and is not an error.
func TestReadExitStatusFollowsTheMeter(t *testing.T) {
	for _, tc := range []struct {
		name   string
		reads  []string
		code   int
		status string
	}{
		{"healthy", []string{"1.0E-02"}, exitOK, "ok"},
		{"over range", []string{"9.9E37"}, exitOK, "over_range"},
		{"queued error", []string{"-113"}, exitFailure, "fault"},
		{"not a number", []string{"9.91E37"}, exitFailure, "fault"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			f := &scpiFake{reads: tc.reads}
			d := linetest.New(t, "ondrakel-DX2-30417", '\n', f.handle)
			r := runReadCmd(t, "--scpi", "--port", d.Link(), "--count", "2", "--json")
			if r.code != tc.code {
				t.Fatalf("exit %d, want %d\nstdout: %s\nstderr: %s", r.code, tc.code, r.out, r.stderr)
			}
			got := jsonReadings(t, r.out)
			if len(got) != 2 || got[0].Status != tc.status {
				t.Fatalf("readings %+v, want 2 with status %s", got, tc.status)
			}
			if tc.status == "over_range" && (got[0].Value != nil || got[0].RawValue != 9.9e37) {
				t.Errorf("over range came out as value %v (raw %v); want no value", got[0].Value, got[0].RawValue)
			}
			checkLogShape(t, r.stderr)
		})
	}
	for _, c := range root.Commands() {
		if c.Name() == "read" && !strings.Contains(c.Long, "the meter reported errors") {
			t.Errorf("read's help does not say that errors the meter reports give exit 1")
		}
	}
}

// Errors the set-up causes are the set-up's: read stops before reading,
// exit 1, the set-up named; no reading is marked for them.
func TestReadSetupErrorsAttributedToSetup(t *testing.T) {
	f := &scpiFake{reads: []string{"1.0E-02"}}
	d := linetest.New(t, "ondrakel-DX2-30417", '\n', f.handle)
	r := runReadCmd(t, "--scpi", "--port", d.Link(), "--count", "2", "--json", "--init", "*RST,BOGUS:ONE,BOGUS:TWO")
	if r.code != exitFailure || !strings.Contains(r.stderr, "set-up") || strings.Count(r.stderr, "-113") < 2 {
		t.Fatalf("exit %d, stderr %s; want 1 naming the set-up and both errors", r.code, r.stderr)
	}
	if got := jsonReadings(t, r.out); len(got) != 0 {
		t.Errorf("readings %+v printed after a failed set-up", got)
	}
	checkLogShape(t, r.stderr)
}

// An unsupported UNIT:KRAT? times out; read then shows the meter's error
// queue and says that --unit exists.
func TestReadUnsupportedUnitQuery(t *testing.T) {
	f := &scpiFake{reads: []string{"1.0E-02"}, noUnit: true}
	d := linetest.New(t, "ondrakel-DX2-30417", '\n', f.handle)
	r := runReadCmd(t, "--scpi", "--port", d.Link(), "--count", "1")
	if r.code != exitFailure || !strings.Contains(r.stderr, `-113,\"Undefined header\"`) || !strings.Contains(r.stderr, "--unit") {
		t.Fatalf("exit %d, stderr %s; want the queued -113 and the --unit hint", r.code, r.stderr)
	}
	// With --unit the same meter reads.
	r = runReadCmd(t, "--scpi", "--port", d.Link(), "--count", "1", "--unit", "MR/S")
	if r.code != exitOK {
		t.Fatalf("with --unit: exit %d, stderr %s", r.code, r.stderr)
	}
}

// --count N gives up when the meter never answers, or is gone for good.
func TestReadGivesUp(t *testing.T) {
	f := &scpiFake{reads: []string{"1.0E-02"}, read: make(chan struct{}, 1)}
	d := linetest.New(t, "ondrakel-DX2-30417", '\n', f.handle)
	done := make(chan readRun, 1)
	go func() {
		// Opened and identified, then the meter goes silent.
		done <- runReadCmd(t, "--scpi", "--port", d.Link(), "--count", "5", "--give-up", "2s", "--unit", "MR/S", "--init", "")
	}()
	waitRead(t, f)
	f.mu.Lock()
	f.mute = true
	f.mu.Unlock()
	select {
	case r := <-done:
		if r.code != exitFailure || !strings.Contains(r.stderr, "giving up") {
			t.Fatalf("silent meter: exit %d, stderr %s; want 1 and giving up", r.code, r.stderr)
		}
		checkLogShape(t, r.stderr)
	case <-time.After(60 * time.Second):
		t.Fatal("read --count 5 never gave up on a silent meter")
	}

	// Gone for good: pulled and never plugged back.
	f2 := &scpiFake{reads: []string{"1.0E-02"}, read: make(chan struct{}, 1)}
	d2 := linetest.New(t, "ondrakel-DX2-30418", '\n', f2.handle)
	go func() {
		done <- runReadCmd(t, "--scpi", "--port", d2.Link(), "--count", "5", "--give-up", "2s", "--unit", "MR/S")
	}()
	waitRead(t, f2)
	d2.Pull()
	select {
	case r := <-done:
		if r.code != exitFailure || !strings.Contains(r.stderr, "giving up") {
			t.Fatalf("pulled meter: exit %d, stderr %s; want 1 and giving up", r.code, r.stderr)
		}
	case <-time.After(60 * time.Second):
		t.Fatal("read --count 5 never gave up on a meter gone for good")
	}
}

// waitRead waits until the fake has answered a READ?.
func waitRead(t *testing.T, f *scpiFake) {
	t.Helper()
	select {
	case <-f.read:
	case <-time.After(60 * time.Second):
		t.Fatal("the meter never got READ?")
	}
}

// --for on a healthy streaming meter ends cleanly: exit 0, nothing on
// standard error (issue: a burst of false timeouts and exit 1 at the
// deadline).
func TestReadForEndsCleanly(t *testing.T) {
	var mu sync.Mutex
	streaming := false
	d := linetest.New(t, "vessoric-LM9-5521", '\n', func(d *linetest.Device, cmd string) {
		mu.Lock()
		defer mu.Unlock()
		switch cmd {
		case "IDN":
			d.Send("VESSORIC LM-9 #5521\n")
		case "STREAM 10":
			streaming = true
			d.Send("ACK\n")
		case "STOP":
			streaming = false
		}
	})
	stop := make(chan struct{})
	defer close(stop)
	go func() {
		tick := time.NewTicker(100 * time.Millisecond)
		defer tick.Stop()
		for {
			select {
			case <-stop:
				return
			case <-tick.C:
				mu.Lock()
				on := streaming
				mu.Unlock()
				if on {
					d.Send("L 123,45 cd/m2 S0\n")
				}
			}
		}
	}()
	r := runReadCmd(t, "--profile", "../../testdata/profiles/vessoric-lm9.yaml", "--port", d.Link(), "--count", "0", "--for", "1500ms")
	if r.code != exitOK || strings.TrimSpace(r.stderr) != "" {
		t.Fatalf("exit %d, stderr:\n%s\nwant exit 0 and nothing on stderr", r.code, r.stderr)
	}
	if n := strings.Count(r.out, "L 123,45 cd/m2 S0"); n < 3 {
		t.Errorf("%d readings in 1.5 s of a 10 Hz stream:\n%s", n, r.out)
	}
}

// Opening errors each say what is wrong, not "link to meter lost".
func TestReadOpeningErrors(t *testing.T) {
	dir := t.TempDir()
	file := filepath.Join(dir, "ttyUSB0")
	if err := os.WriteFile(file, nil, 0o644); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct{ port, words string }{
		{filepath.Join(dir, "ttyUSB7"), "no such device"},
		{file, "regular file"},
		{dir, "directory"},
	} {
		r := runReadCmd(t, "--scpi", "--port", tc.port, "--count", "1")
		if r.code != exitFailure || !strings.Contains(r.stderr, tc.words) || strings.Contains(r.stderr, "link to meter lost") {
			t.Errorf("%s: exit %d, stderr %s; want 1 saying %q", tc.port, r.code, r.stderr, tc.words)
		}
		checkLogShape(t, r.stderr)
	}
}

// One over-long line is reported once, not once per poll.
func TestReadLongLineReportedOnce(t *testing.T) {
	n := 0
	d := linetest.New(t, "veltrane-KR40-1187", '\r', func(d *linetest.Device, cmd string) {
		switch cmd {
		case "ID?":
			d.Send("VELTRANE KR-40 SN=KR40-1187 FW=2.3\r\n")
		case "REMOTE", "UNIT UGY/S":
			d.Send("OK\r\n")
		case "RD?":
			n++
			if n == 2 {
				d.Send("RD " + strings.Repeat("9", 20000) + "\r\n")
				return
			}
			d.Send("RD +1.0000E-01 uGy/s OK\r\n")
		}
	})
	r := runReadCmd(t, "--profile", "../../testdata/profiles/veltrane-kr40.yaml", "--port", d.Link(), "--count", "4")
	if c := strings.Count(r.stderr, "longer than"); c != 1 {
		t.Errorf("the long line reported %d times, want once:\n%s", c, r.stderr)
	}
	checkLogShape(t, r.stderr)
}
