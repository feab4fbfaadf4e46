//go:build board

package main

// wireStoreCompletion: the board build has no workstation store.
func wireStoreCompletion() {}
