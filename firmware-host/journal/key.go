package journal

import (
	"crypto/ed25519"
	"crypto/rand"
	"encoding/hex"
	"errors"
	"fmt"
	"io/fs"
	"os"
	"path/filepath"
	"strings"
)

// KeyFileName is the board's private key file inside a key directory.
const KeyFileName = "board.key"

// ErrKeyPermissions reports a key file or directory readable by others.
var ErrKeyPermissions = errors.New("board key is not private")

// LoadOrCreateKey returns the board's ed25519 key at path, creating it
// (and its directory, mode 0700) with mode 0600 if it does not exist. The
// file holds the 32-byte ed25519 seed (RFC 8032) as 64 hex digits and a
// newline. A key file or directory that group or others may access is
// refused: a copied key lets anyone sign records as this board.
func LoadOrCreateKey(path string) (ed25519.PrivateKey, error) {
	dir := filepath.Dir(path)
	if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
		if err := os.MkdirAll(dir, 0o700); err != nil {
			return nil, fmt.Errorf("board key directory %s: %w", dir, err)
		}
		if err := checkMode(dir, true); err != nil {
			return nil, err
		}
		_, priv, err := ed25519.GenerateKey(rand.Reader)
		if err != nil {
			return nil, fmt.Errorf("generate board key: %w", err)
		}
		if err := writeKey(path, priv); err != nil {
			return nil, err
		}
		return priv, nil
	}
	return LoadKey(path)
}

// LoadKey reads an existing board key, refusing loose permissions.
func LoadKey(path string) (ed25519.PrivateKey, error) {
	if err := checkMode(filepath.Dir(path), true); err != nil {
		return nil, err
	}
	if err := checkMode(path, false); err != nil {
		return nil, err
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("board key %s: %w", path, err)
	}
	seed, err := hex.DecodeString(strings.TrimSpace(string(b)))
	if err != nil || len(seed) != ed25519.SeedSize {
		return nil, fmt.Errorf("board key %s: line 1: expected %d hex digits (an ed25519 seed)", path, 2*ed25519.SeedSize)
	}
	return ed25519.NewKeyFromSeed(seed), nil
}

func checkMode(path string, dir bool) error {
	st, err := os.Stat(path)
	if err != nil {
		return fmt.Errorf("board key: %w", err)
	}
	if dir && !st.IsDir() {
		return fmt.Errorf("board key directory %s is not a directory", path)
	}
	if st.Mode().Perm()&0o077 != 0 {
		want := "600"
		what := "file"
		if dir {
			want, what = "700", "directory"
		}
		return fmt.Errorf("%w: %s %s has mode %04o; only its owner may have access (fix: chmod %s %s)",
			ErrKeyPermissions, what, path, st.Mode().Perm(), want, path)
	}
	return nil
}

func writeKey(path string, priv ed25519.PrivateKey) error {
	tmp := path + ".new"
	os.Remove(tmp) // left by a power cut during an earlier first start
	f, err := os.OpenFile(tmp, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o600)
	if err != nil {
		return fmt.Errorf("board key %s: %w", tmp, err)
	}
	_, err = fmt.Fprintf(f, "%s\n", hex.EncodeToString(priv.Seed()))
	if err == nil {
		err = f.Sync()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err == nil {
		err = os.Rename(tmp, path)
	}
	if err != nil {
		os.Remove(tmp)
		return fmt.Errorf("board key %s: %w", path, err)
	}
	if d, err := os.Open(filepath.Dir(path)); err == nil {
		d.Sync()
		d.Close()
	}
	return nil
}

// ParsePublicKey decodes a board public key given as 64 hex digits.
func ParsePublicKey(s string) (ed25519.PublicKey, error) {
	b, err := hex.DecodeString(strings.TrimSpace(s))
	if err != nil || len(b) != ed25519.PublicKeySize {
		return nil, fmt.Errorf("board key %q: expected %d hex digits (an ed25519 public key)", abbrevHex(s), 2*ed25519.PublicKeySize)
	}
	return ed25519.PublicKey(b), nil
}
