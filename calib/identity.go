package calib

import (
	"fmt"
	"strings"
	"unicode"

	"kermalux/drivers"
)

// AppliesTo tells whether the certificate is the one of the meter that
// identified itself as id: the model and the serial number it reported
// must be those the certificate names. It returns nil when they are, and
// otherwise an error whose text says which differs, to be spoken before
// the first exposure and kept with every reading.
//
// Serial numbers compare without case and spaces. A model matches when,
// ignoring case, spaces and punctuation, the certificate's model is the
// reported model or the maker and model together (a certificate prints
// "Veltrane KR-40" where the meter answers maker "VELTRANE", model
// "KR-40"). A meter that reports no serial cannot be matched: its
// certificate is not confirmed as its own.
func (c *Certificate) AppliesTo(id drivers.Identity) error {
	switch {
	case strings.TrimSpace(id.Model) == "":
		return fmt.Errorf("the meter did not report its model, so certificate %s (%s, serial %s) cannot be confirmed as its own", c.Number, c.Model, c.Serial)
	case !sameModel(c.Model, id):
		return fmt.Errorf("certificate %s is for a %s, but the meter on the link is a %s", c.Number, c.Model, spokenIdentity(id))
	case strings.TrimSpace(id.Serial) == "":
		return fmt.Errorf("the meter did not report its serial number, so certificate %s (serial %s) cannot be confirmed as its own", c.Number, c.Serial)
	case !sameSerial(c.Serial, id.Serial):
		return fmt.Errorf("certificate %s is for serial %s, but the meter on the link reports serial %s", c.Number, c.Serial, id.Serial)
	}
	return nil
}

func sameModel(certModel string, id drivers.Identity) bool {
	c := modelKey(certModel)
	return c != "" && (c == modelKey(id.Model) || c == modelKey(id.Maker+id.Model))
}

// modelKey keeps the letters and digits of a model name, upper case.
func modelKey(s string) string {
	var b strings.Builder
	for _, r := range s {
		if unicode.IsLetter(r) || unicode.IsDigit(r) {
			b.WriteRune(unicode.ToUpper(r))
		}
	}
	return b.String()
}

func spokenIdentity(id drivers.Identity) string {
	s := strings.TrimSpace(strings.TrimSpace(id.Maker) + " " + strings.TrimSpace(id.Model))
	if id.Serial != "" {
		s += ", serial " + id.Serial
	}
	return s
}
