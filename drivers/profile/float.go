package profile

import (
	"strconv"

	"kermalux/drivers/units"
)

func parseFloat(b []byte) (float64, error) { return strconv.ParseFloat(string(b), 64) }

func unitsCanonical(p *Profile) string { return units.Canonical(p.Quantity) }
