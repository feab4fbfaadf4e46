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
func (e *Engine) next(ctx context.Context, role string) (drivers.Reading, error) {
	return e.cfg.Meters[role].Read(ctx)
}
