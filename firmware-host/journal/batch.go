package journal

// ZeroHash is the hex "previous hash" of a session's first record.
func ZeroHash() string { return zeroHashHex() }
