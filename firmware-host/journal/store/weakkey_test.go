package store

import (
	"context"
	"crypto/ed25519"
	"crypto/rand"
	"errors"
	"testing"
)

// A key of small order is refused at enrolment (anyone could sign for
// it); keys made by ed25519.GenerateKey are enrolled. The all-zero key
// (the point y = 0, order 4) and the identity (y = 1, order 1) are
// small-order points of Curve25519's Edwards form (RFC 7748 4.1, RFC 8032
// 5.1: cofactor 8); the check is the standard library's own verification
// of a forged signature (RFC 8032 5.1.7). Before, both were enrolled.
func TestEnrollRefusesSmallOrderKeys(t *testing.T) {
	st := openStore(t)
	ctx := context.Background()
	zero := make(ed25519.PublicKey, ed25519.PublicKeySize)
	identity := make(ed25519.PublicKey, ed25519.PublicKeySize)
	identity[0] = 1
	for name, key := range map[string]ed25519.PublicKey{"all zero": zero, "identity": identity} {
		if err := st.Enroll(ctx, key, "weak "+name); !errors.Is(err, ErrRefused) {
			t.Errorf("%s key enrolled: %v", name, err)
		}
	}
	for i := range 8 {
		pub, _, err := ed25519.GenerateKey(rand.Reader)
		if err != nil {
			t.Fatal(err)
		}
		if err := st.Enroll(ctx, pub, "van"); err != nil {
			t.Errorf("generated key %d refused: %v", i, err)
		}
	}
}
