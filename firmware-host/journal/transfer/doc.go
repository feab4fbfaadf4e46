// Package transfer moves journal records from a board to the workstation
// store, in three parts so that the board build links only its own:
//
//   - wire: the version 2 stream format (segments of records with signed
//     heads, compressed), shared by both sides and by bundle files;
//   - push: the board's side (push over HTTP, write a bundle);
//   - receive: the workstation's side (the HTTP receiver, import of a
//     bundle), which alone links the store.
//
// This package holds only what both sides show the engineer: progress.
// PROTOCOL.md documents the format and the checks.
package transfer
