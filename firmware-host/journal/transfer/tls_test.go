package transfer

import (
	"context"
	"encoding/pem"
	"io"
	"log"
	"net/http/httptest"
	"os"
	"path/filepath"
	"testing"
)

// TestPushOverTLS pushes to an HTTPS receiver whose certificate is trusted
// through a CA file (push --ca).
func TestPushOverTLS(t *testing.T) {
	j := board(t, t.TempDir(), 1, 2, true)
	defer j.Close()
	st := workstation(t, j.PublicKey())
	srv := httptest.NewUnstartedServer(Handler(st, quiet))
	srv.Config.ErrorLog = log.New(io.Discard, "", 0) // the untrusted attempt below logs a handshake error
	srv.StartTLS()
	defer srv.Close()
	ca := filepath.Join(t.TempDir(), "ca.pem")
	os.WriteFile(ca, pem.EncodeToMemory(&pem.Block{Type: "CERTIFICATE", Bytes: srv.Certificate().Raw}), 0o644)
	client, err := ClientWithCA(ca)
	if err != nil {
		t.Fatal(err)
	}
	sum, err := Push(context.Background(), j, PushOptions{URL: srv.URL, Client: client})
	if err != nil || sum.Sent == 0 {
		t.Fatalf("push over TLS: %+v %v", sum, err)
	}
	// Without the CA the certificate is not trusted and nothing is sent.
	if _, err := Push(context.Background(), j, PushOptions{URL: srv.URL, Retries: 1}); err == nil {
		t.Error("push trusted an unknown certificate")
	}
	if _, err := ClientWithCA(filepath.Join(t.TempDir(), "none.pem")); err == nil {
		t.Error("missing CA file accepted")
	}
}
