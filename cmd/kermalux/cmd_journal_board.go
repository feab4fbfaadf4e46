//go:build board

package main

import (
	"context"
	"errors"
)

// verifyStore: the board build links no workstation store (a test on its
// dependency list checks it), so journal verify --store is refused there.
type verifyStore struct{}

func openStoreForVerify(string) (verifyStore, error) {
	return verifyStore{}, errors.New("journal verify --store: the board build carries no workstation store; run it on the workstation, or give --key")
}

func (verifyStore) Close() error { return nil }

func (verifyStore) enrolled(context.Context, string) (string, bool, error) { return "", false, nil }

func (verifyStore) head(context.Context, string) (int64, string, error) { return 0, "", nil }
