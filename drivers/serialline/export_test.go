package serialline

import "context"

// WaitFor waits until cond holds, looking again each time the background
// reader changes something (bytes read, a line queued, a flush taken, the
// device gone), or until ctx ends: tests wait on the reader's events, not
// on time.
// cond must not be called with p.mu held; it may take it.
func (p *Port) WaitFor(ctx context.Context, cond func() bool) error {
	for {
		p.mu.Lock()
		if p.changed == nil {
			p.changed = make(chan struct{})
		}
		ch := p.changed
		p.mu.Unlock()
		if cond() {
			return nil
		}
		select {
		case <-ch:
		case <-ctx.Done():
			return ctx.Err()
		}
	}
}

// Received counts the bytes the background reader has taken off the
// device since Open.
func (p *Port) Received() uint64 {
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.received
}
