package engine

import (
	"context"

	"kermalux/drivers"
)

// next returns the next reading of a meter. Meters are read one after
// the other in the engine's goroutine: deterministic with a manual clock,
// and a streaming meter's lines that backed up while the engine waited
// for the operator are caught by the rule that each meter must show the
// beam itself before settling is judged.
//
// Readings queued for the journal are written before a read that would
// wait (the meter has nothing received yet), so the write overlaps the
// wait and a backlog is journalled in one write.
func (e *Engine) next(ctx context.Context, role string) (drivers.Reading, error) {
	m := e.cfg.Meters[role]
	if q, ok := m.(drivers.Queued); !ok || q.Pending() == 0 {
		_ = e.flushReadings(ctx) // a failure is sticky (journalErr)
	}
	return m.Read(ctx)
}
