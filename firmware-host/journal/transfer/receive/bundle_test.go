package receive

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"testing"

	"kermalux/firmware-host/journal"
	"kermalux/firmware-host/journal/journaltest"
	"kermalux/firmware-host/journal/store"
	"kermalux/firmware-host/journal/store/storetest"
	"kermalux/firmware-host/journal/transfer/push"
	"kermalux/firmware-host/journal/transfer/wire"
)

func bundleOf(t testing.TB, j *journal.Journal, audience string, segment int) []byte {
	t.Helper()
	var buf bytes.Buffer
	if _, err := push.WriteBundle(context.Background(), j, &buf, audience, segment, nil); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestBundleImport(t *testing.T) {
	storetest.Each(t, func(t *testing.T, backend string) {
		ctx := context.Background()
		j := board(t, t.TempDir(), 2, 4, true)
		defer j.Close()
		data := bundleOf(t, j, "", 6)
		st := workstation(t, backend, j.PublicKey())
		sum, err := Import(ctx, st, bytes.NewReader(data), "usb.kxb", nil)
		want := journaltest.Records(4, true) + journaltest.Records(4, false)
		if err != nil || sum.Stored != want {
			t.Fatalf("import: %+v %v, want %d stored", sum, err, want)
		}
		// Importing again stores nothing new.
		if sum, err := Import(ctx, st, bytes.NewReader(data), "usb.kxb", nil); err != nil || sum.Stored != 0 || sum.Duplicates != want {
			t.Errorf("second import: %+v %v", sum, err)
		}
		sameRecords(t, j, st)
		// An unenrolled board's bundle is refused from its preamble.
		if _, err := Import(ctx, st2(t, backend), bytes.NewReader(data), "usb.kxb", nil); !errors.Is(err, store.ErrNotEnrolled) || !strings.Contains(err.Error(), "usb.kxb") {
			t.Errorf("unenrolled import: %v", err)
		}
		// A bundle written for one store is refused by another (issue 14 item 13).
		other := workstation(t, backend, j.PublicKey())
		if _, err := Import(ctx, other, bytes.NewReader(bundleOf(t, j, st.ID(), 6)), "usb.kxb", nil); !errors.Is(err, store.ErrAudience) {
			t.Errorf("bundle for another store: %v", err)
		}
	})
}

func st2(t testing.TB, backend string) *store.Store { return storetest.New(t, backend) }

// TestBundleTampering: a changed, cut or rearranged bundle is refused with
// the file named, and nothing of it is stored.
func TestBundleTampering(t *testing.T) {
	ctx := context.Background()
	j := board(t, t.TempDir(), 2, 4, false)
	defer j.Close()
	data := bundleOf(t, j, "", 6)
	other := board(t, t.TempDir(), 1, 1, false)
	defer other.Close()
	// A bundle whose segments were re-signed by the same key but one
	// segment left out: the closing signature does not hold.
	var short bytes.Buffer
	sw, _ := wire.NewWriter(&short, wire.KindBundle, "", j)
	ss, _ := j.Sessions(ctx)
	recs, _ := j.Records(ctx, ss[0].ID, 0, 6)
	sw.Segment(recs)
	sw.Close()
	trimmed := append([]byte(nil), short.Bytes()...)
	for _, c := range []struct {
		name string
		data []byte
		want error
		text string
	}{
		{"truncate", data[:len(data)/2], wire.ErrTruncated, "cut short"},
		{"truncate the end", data[:len(data)-3], nil, "usb.kxb"},
		{"flip a compressed byte", flip(data, len(data)/2), nil, "usb.kxb"},
		{"another board's preamble", append(append([]byte(wire.Magic), other.PublicKey()...), data[len(wire.Magic)+32:]...), nil, "usb.kxb"},
		{"not a bundle", []byte("hello\n"), wire.ErrFormat, "not a kermalux stream"},
		{"a version 1 bundle", []byte(`{"format":"kermalux-bundle-1","board":"00"}` + "\n"), wire.ErrFormat, "version 1"},
		{"one session only, same key", trimmed, nil, ""},
	} {
		t.Run(c.name, func(t *testing.T) {
			st := workstation(t, "sqlite", j.PublicKey(), other.PublicKey())
			_, err := Import(ctx, st, bytes.NewReader(c.data), "usb.kxb", nil)
			if c.name == "one session only, same key" {
				if err != nil {
					t.Errorf("a genuine partial bundle refused: %v", err)
				}
				return
			}
			if err == nil || (c.want != nil && !errors.Is(err, c.want)) || !strings.Contains(err.Error(), c.text) || !strings.Contains(err.Error(), "usb.kxb") {
				t.Errorf("got %v, want an error naming the file and %q", err, c.text)
			}
			if n, _ := st.Sessions(ctx, store.Query{}); len(n) != 0 {
				t.Errorf("a refused bundle left %d sessions", len(n))
			}
		})
	}
}

func flip(b []byte, i int) []byte {
	c := append([]byte(nil), b...)
	c[i] ^= 0x10
	return c
}
