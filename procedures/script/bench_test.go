package script

import (
	"testing"

	"github.com/goccy/go-yaml"

	"kermalux/procedures/builtin"
)

// The benchmarks compare reading the built-ins into kermalux procedures
// with decoding the same YAML into plain Go values (the baseline), and
// time a full check and flatten of the acceptance sequence, which parses
// its seven included procedures again each time.

func builtinTexts(b *testing.B) map[string][]byte {
	texts := map[string][]byte{}
	for _, n := range builtin.Names() {
		data, err := builtin.Read(n)
		if err != nil {
			b.Fatal(err)
		}
		texts[n] = data
	}
	return texts
}

func BenchmarkDecodeBaseline(b *testing.B) {
	texts := builtinTexts(b)
	b.ReportAllocs()
	for b.Loop() {
		for _, data := range texts {
			var v any
			if err := yaml.Unmarshal(data, &v); err != nil {
				b.Fatal(err)
			}
		}
	}
}

func BenchmarkParseBuiltins(b *testing.B) {
	texts := builtinTexts(b)
	b.ReportAllocs()
	for b.Loop() {
		for n, data := range texts {
			if _, err := Parse(n, data); err != nil {
				b.Fatal(err)
			}
		}
	}
}

func BenchmarkFlattenAcceptance(b *testing.B) {
	p, err := LoadBuiltin("acceptance")
	if err != nil {
		b.Fatal(err)
	}
	env := Env{FieldModes: []string{"36 cm", "25 cm", "17 cm", "12 cm"}}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Flatten(p, env); err != nil {
			b.Fatal(err)
		}
	}
}
