package main

import (
	"bufio"
	"bytes"
	"encoding/json"
	"math"
	"testing"

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
	if r := got[0]; r.Status != "ok" || r.Unit != "µGy/s" || math.Abs(r.Value-want) > 1e-9 || r.RawUnit != "mR/s" {
		t.Errorf("first reading %+v, want %.6g µGy/s from 0.01 mR/s", r, want)
	}
	if r := got[1]; r.Status != "over_range" {
		t.Errorf("second reading status %q, want over_range", r.Status)
	}
}
