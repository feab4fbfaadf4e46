package scpi_test

import (
	"fmt"

	"kermalux/drivers/scpi"
)

// An *IDN? reply has four comma-separated fields (IEEE 488.2, 10.14.1).
func ExampleParseIDN() {
	id, err := scpi.ParseIDN("ONDRAKEL,DX-2,30417,1.4.2")
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(id.Maker, id.Model, id.Serial, id.Firmware)
	// Output:
	// ONDRAKEL DX-2 30417 1.4.2
}

// SCPI's special values (SCPI-99, Volume 1, 7.2.1.5): 9.9E37 is over range
// (no value), 9.91E37 is not a number; an NR3 number is a value.
func ExampleParseNumber() {
	for _, s := range []string{"+1.234E-01", "9.9E37", "9.91E37"} {
		v, st, err := scpi.ParseNumber(s)
		if err != nil {
			fmt.Println(s, err)
			continue
		}
		if st != "ok" {
			fmt.Println(s, st)
			continue
		}
		fmt.Println(s, st, v)
	}
	// Output:
	// +1.234E-01 ok 0.1234
	// 9.9E37 over_range
	// 9.91E37 fault
}
