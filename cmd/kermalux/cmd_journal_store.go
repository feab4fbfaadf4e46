//go:build !board

package main

import (
	"context"
	"fmt"

	"kermalux/firmware-host/journal/store"
)

// verifyStore is a workstation store as journal verify --store consults it.
type verifyStore struct{ *store.Store }

func openStoreForVerify(path string) (verifyStore, error) {
	if !store.Exists(path) {
		return verifyStore{}, fmt.Errorf("store %s does not exist", path)
	}
	st, err := store.Open(path)
	return verifyStore{st}, err
}

func (s verifyStore) enrolled(ctx context.Context, key string) (string, bool, error) {
	boards, err := s.Boards(ctx)
	if err != nil {
		return "", false, err
	}
	for _, b := range boards {
		if b.Key == key {
			return b.Name, true, nil
		}
	}
	return "", false, nil
}

func (s verifyStore) head(ctx context.Context, session string) (int64, string, error) {
	recs, err := s.Records(ctx, session, 0, 0)
	if err != nil || len(recs) == 0 {
		return 0, "", err
	}
	last := recs[len(recs)-1]
	return last.Seq, last.Hash, nil
}
