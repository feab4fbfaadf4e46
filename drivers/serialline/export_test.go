package serialline

import "context"

// WaitFor waits until cond holds, looking again each time the background
// reader changes something (bytes read, a line queued, a flush taken, the
// device gone), or until ctx ends: tests wait on the reader's events, not
// on time.
func (p *Port) WaitFor(ctx context.Context, cond func() bool) error {
	return p.waitChange(ctx, cond)
}

// Received counts the bytes the background reader has taken off the
// device since Open.
func (p *Port) Received() uint64 {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.received
}
