package profile_test

import (
	"fmt"

	"kermalux/drivers/profile"
)

// A meter described by a profile: its reply pattern, its number format
// (here a decimal comma) and the units it prints. ParseLine reads one
// reply as the meter printed it; Convert turns the value into the
// canonical unit of the quantity, cd/m² for luminance; a number in
// another format is refused, saying what was expected. The meter is
// invented; the foot-lambert's factor is NIST SP 811 (2008), appendix B.9:
// 1 fL = 3.426 259 cd/m².
func ExampleProfile_ParseLine() {
	p, err := profile.Parse("example.yaml", []byte(`
name: Example LM
quantity: luminance
serial: {baud: 9600, data_bits: 8, parity: none, stop_bits: 1, flow_control: none,
         send_line_end: lf, receive_line_end: lf, longest_line: 64}
reading:
  mode: polled
  send: "R?"
  reply: '^L (?P<value>\S+) (?P<unit>\S+) (?P<status>S[0-9])$'
numbers: {decimal_mark: ",", thousands_mark: "", sign: optional, exponent: none}
units: [cd/m2, fL]
status: {ok: [S0], over_range: [S1], under_range: [S2], fault: [S9]}
`))
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, line := range []string{"L 123,45 cd/m2 S0", "L 10,00 fL S0", "L 12.5 cd/m2 S0"} {
		v, unit, status, err := p.ParseLine(line)
		if err != nil {
			fmt.Printf("%q: %v\n", line, err)
			continue
		}
		c, _ := p.Convert(v, unit)
		fmt.Printf("%q: %g %s (%s) = %.4g cd/m²\n", line, v, unit, status, c)
	}
	// Output:
	// "L 123,45 cd/m2 S0": 123.45 cd/m2 (ok) = 123.5 cd/m²
	// "L 10,00 fL S0": 10 fL (ok) = 34.26 cd/m²
	// "L 12.5 cd/m2 S0": reply not understood: value in "L 12.5 cd/m2 S0": "12.5": unexpected ".5" (decimal mark ",")
}
