package journal

import (
	"crypto/ed25519"
	"crypto/rand"
	"crypto/sha512"
	"sync"

	"filippo.io/edwards25519"
)

// signer makes Ed25519 signatures for the journal's appends with the
// costly half of signing done ahead of time.
//
// An Ed25519 signature of M under secret scalar a (RFC 8032, 5.1.6) is
// R = r·B, S = (r + k·a) mod L with k = SHA-512(R ‖ A ‖ M); RFC 8032
// derives the nonce r from the key and the message, so R = r·B, a fixed-
// base scalar multiplication and most of the 45 µs a signature costs on
// the board, can only start once the record exists. The journal draws r
// at random instead and computes R in the background while the board
// idles between readings; an append then pays one SHA-512 and a scalar
// multiply-add. The signatures verify with any Ed25519 verifier
// (crypto/ed25519.Verify, RFC 8032 5.1.7): a verifier cannot tell how r
// was chosen. What a random r must be, it is: uniform modulo L, secret
// and used once. It is hedged (SHA-512 of the key's secret prefix and
// 64 bytes from crypto/rand, the same construction RFC 8032 uses with
// the message in place of the random bytes), so a weak random source
// still gives nonces no one without the key can predict, and each
// precomputed pair is taken from the pool once and dropped.
//
// filippo.io/edwards25519 is the group arithmetic of the standard
// library's crypto/ed25519, published as a module; writing that
// arithmetic here would be the riskier choice.
type signer struct {
	a      *edwards25519.Scalar // the secret scalar
	prefix []byte               // the secret half of SHA-512(seed) that hedges the nonces
	pub    []byte
	pool   chan nonce
	stop   chan struct{}
	wg     sync.WaitGroup
	start  sync.Once // the pool fills from the first signature on
}

// nonce is a precomputed r and its R = r·B, encoded.
type nonce struct {
	r *edwards25519.Scalar
	R []byte
}

// signerPool is how many signatures' nonces are kept ready: the records
// of a beam release's held readings (tens) and more. A longer burst signs
// the rest at the old cost; a larger pool would take longer to fill at
// start-up on a single-core board.
const signerPool = 128

// newSigner makes a signer for priv. Its pool starts filling in the
// background at the first signature, so that opening a journal only to
// read it, or the board's start-up, pays nothing for it; Close stops it.
func newSigner(priv ed25519.PrivateKey) *signer {
	h := sha512.Sum512(priv.Seed())
	a, err := new(edwards25519.Scalar).SetBytesWithClamping(h[:32])
	if err != nil {
		panic("journal: clamping a 32-byte scalar cannot fail: " + err.Error())
	}
	return &signer{a: a, prefix: append([]byte(nil), h[32:]...), pub: priv.Public().(ed25519.PublicKey),
		pool: make(chan nonce, signerPool), stop: make(chan struct{})}
}

// fill keeps the pool full until Close.
func (s *signer) fill() {
	defer s.wg.Done()
	for {
		n := s.fresh()
		select {
		case s.pool <- n:
		case <-s.stop:
			return
		}
	}
}

// fresh draws a hedged nonce and computes its R.
func (s *signer) fresh() nonce {
	var noise [64]byte
	_, _ = rand.Read(noise[:]) // crypto/rand.Read never fails (Go 1.24 and later)
	d := sha512.New()
	d.Write(s.prefix)
	d.Write(noise[:])
	r, err := new(edwards25519.Scalar).SetUniformBytes(d.Sum(nil))
	if err != nil {
		panic("journal: a 64-byte uniform scalar cannot fail: " + err.Error())
	}
	return nonce{r: r, R: new(edwards25519.Point).ScalarBaseMult(r).Bytes()}
}

// Sign signs msg: with a nonce from the pool, or one made now when the
// pool is empty (a long burst of appends).
func (s *signer) Sign(msg []byte) []byte {
	s.start.Do(func() {
		select {
		case <-s.stop: // closed: sign on the spot, start nothing
		default:
			s.wg.Add(1)
			go s.fill()
		}
	})
	var n nonce
	select {
	case n = <-s.pool:
	default:
		n = s.fresh()
	}
	d := sha512.New()
	d.Write(n.R)
	d.Write(s.pub)
	d.Write(msg)
	k, err := new(edwards25519.Scalar).SetUniformBytes(d.Sum(nil))
	if err != nil {
		panic("journal: a 64-byte uniform scalar cannot fail: " + err.Error())
	}
	S := new(edwards25519.Scalar).MultiplyAdd(k, s.a, n.r)
	return append(append(make([]byte, 0, ed25519.SignatureSize), n.R...), S.Bytes()...)
}

// Close stops the background pool.
func (s *signer) Close() {
	close(s.stop)
	s.wg.Wait()
}
