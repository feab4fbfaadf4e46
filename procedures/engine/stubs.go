package engine

import "context"

func (e *Engine) measure(ctx context.Context, idx int, s Step) error { return nil }
func (e *Engine) compute(ctx context.Context, idx int, s Step) error { return nil }
func (e *Engine) judge(ctx context.Context, idx int, s Step) error   { return nil }

func spokenQuantity(q string) string { return q }
func fmtNum(v float64) string         { return "" }
