package profile

import (
	"errors"
	"fmt"
	"path/filepath"
	"reflect"
	"regexp"
	"strconv"
	"strings"
	"time"

	"github.com/goccy/go-yaml"
	"github.com/goccy/go-yaml/ast"
	"github.com/goccy/go-yaml/parser"

	"kermalux/drivers"
	"kermalux/drivers/filepos"
	"kermalux/drivers/serialline"
	"kermalux/drivers/units"
)

// The file form; keys are documented in FORMAT.md.
type fileProfile struct {
	Name     string         `yaml:"name"`
	Maker    string         `yaml:"maker"`
	Model    string         `yaml:"model"`
	Quantity string         `yaml:"quantity"`
	Serial   fileSerial     `yaml:"serial"`
	Identify *fileExchange  `yaml:"identify"`
	Setup    []fileExchange `yaml:"setup"`
	Reading  fileReading    `yaml:"reading"`
	Numbers  fileNumbers    `yaml:"numbers"`
	Units    []string       `yaml:"units"`
	Status   fileStatus     `yaml:"status"`
}

type fileSerial struct {
	Baud        int    `yaml:"baud"`
	DataBits    int    `yaml:"data_bits"`
	Parity      string `yaml:"parity"`
	StopBits    int    `yaml:"stop_bits"`
	FlowControl string `yaml:"flow_control"`
	SendEnd     string `yaml:"send_line_end"`
	ReceiveEnd  string `yaml:"receive_line_end"`
	LongestLine int    `yaml:"longest_line"`
}

type fileExchange struct {
	Send   string `yaml:"send"`
	Expect string `yaml:"expect"`
	Reply  string `yaml:"reply"` // identify only: pattern with named groups
}

type fileReading struct {
	Mode          string        `yaml:"mode"`
	Send          string        `yaml:"send"`
	Start         *fileExchange `yaml:"start"`
	Stop          string        `yaml:"stop"`
	Period        string        `yaml:"period"`
	SilentPeriods int           `yaml:"silent_periods"`
	ReplyTimeout  string        `yaml:"reply_timeout"`
	Reply         string        `yaml:"reply"`
	Unit          string        `yaml:"unit"`
}

type fileNumbers struct {
	DecimalMark   *string `yaml:"decimal_mark"`
	ThousandsMark *string `yaml:"thousands_mark"`
	Sign          string  `yaml:"sign"`
	Exponent      string  `yaml:"exponent"`
}

type fileStatus struct {
	OK         []string `yaml:"ok"`
	OverRange  []string `yaml:"over_range"`
	UnderRange []string `yaml:"under_range"`
	Fault      []string `yaml:"fault"`
}

// Error is a malformed profile: the file, the position, the key and what
// was wrong or expected (the shared position error of kermalux's files).
type Error = filepos.Error

// Load reads and checks a profile file (at most MaxFileSize bytes, refused
// before it is read whole).
func Load(path string) (*Profile, error) {
	data, err := filepos.ReadFile(path, MaxFileSize, "meter profile")
	if err != nil {
		return nil, fmt.Errorf("meter profile: %w", err)
	}
	return Parse(path, data)
}

// Parse checks a profile held in data; name is the file name used in
// error messages (file:line:column: key: what was expected).
func Parse(name string, data []byte) (*Profile, error) {
	if name == "" {
		name = "profile"
	}
	if len(data) > MaxFileSize {
		return nil, &Error{File: name, Line: 1, Column: 1, Msg: fmt.Sprintf("%d bytes: a profile is at most %d bytes", len(data), MaxFileSize)}
	}
	file, err := parser.ParseBytes(data, 0)
	if err != nil {
		return nil, yamlError(name, err)
	}
	var fp fileProfile
	if err := decode(data, &fp); err != nil {
		return nil, yamlError(name, err)
	}
	c := checker{name: name, file: file}
	p := c.build(&fp)
	if c.err != nil {
		return nil, c.err
	}
	p.Source = name
	return p, nil
}

// decode runs the YAML decoder, turning a panic inside it (go-yaml v1.19.2
// panics on some malformed tagged nodes, found by FuzzParse) into an error.
func decode(data []byte, fp *fileProfile) (err error) {
	defer func() {
		if r := recover(); r != nil {
			err = fmt.Errorf("the file is not a profile the YAML decoder can read (%v); expected the layout in drivers/profile/FORMAT.md", r)
		}
	}()
	return yaml.UnmarshalWithOptions(data, fp, yaml.DisallowUnknownField())
}

func yamlError(name string, err error) error {
	var ye yaml.Error
	if errors.As(err, &ye) {
		e := &Error{File: name, Msg: ye.GetMessage()}
		if tk := ye.GetToken(); tk != nil && tk.Position != nil {
			e.Line, e.Column = tk.Position.Line, tk.Position.Column
		}
		var uf *yaml.UnknownFieldError
		if errors.As(err, &uf) {
			e.Msg += " (see drivers/profile/FORMAT.md for the keys)"
		}
		var te *yaml.TypeError
		if errors.As(err, &te) && te.DstType != nil {
			val := ""
			if tk := ye.GetToken(); tk != nil {
				val = fmt.Sprintf("%q: ", tk.Value)
			}
			e.Msg = val + "expected " + kindName(te.DstType)
		}
		return e
	}
	return &Error{File: name, Msg: err.Error()}
}

func kindName(t reflect.Type) string {
	for t.Kind() == reflect.Pointer {
		t = t.Elem()
	}
	switch t.Kind() {
	case reflect.Int, reflect.Int64, reflect.Int32:
		return "a whole number"
	case reflect.String:
		return "text"
	case reflect.Slice:
		return "a list"
	case reflect.Struct, reflect.Map:
		return "a mapping of keys"
	}
	return t.Kind().String()
}

// Bounds of the profile format: every size and count is bounded, so no
// profile can make kermalux hold more than a little memory or wait
// unreasonably (issue: a longest_line of 2^34 exhausted memory at open).
const (
	MaxFileSize      = 64 << 10                // bytes of the file
	MaxLongestLine   = serialline.MaxLineLimit // serial.longest_line, bytes
	MaxCommand       = 256                     // a command sent (identify, setup, reading.send, start, stop)
	MaxPattern       = 1024                    // a regular expression, bytes
	MaxSetup         = 32                      // set-up exchanges
	MaxUnits         = 16                      // units listed
	MaxTokens        = 32                      // status tokens in each list
	MaxToken         = 64                      // bytes of a status token
	MaxSilentPeriods = 1000                    // reading.silent_periods
	MaxName          = 128                     // name, maker, model
	MaxDuration      = 10 * time.Minute        // reading.period and reading.reply_timeout
	MinDuration      = time.Millisecond        // the same, from below
)

// checker turns the file form into a Profile, keeping the first error.
type checker struct {
	name string
	file *ast.File
	err  *Error
}

// fail records an error at key (a dotted path such as "reading.reply" or
// "setup[1].send"); a missing key is reported at its nearest parent.
func (c *checker) fail(key, format string, args ...any) {
	if c.err != nil {
		return
	}
	e := &Error{File: c.name, Key: key, Msg: fmt.Sprintf(format, args...)}
	for k := key; ; {
		if line, col, ok := c.pos(k); ok {
			e.Line, e.Column = line, col
			break
		}
		i := strings.LastIndexAny(k, ".[")
		if i < 0 {
			e.Line, e.Column = 1, 1
			break
		}
		k = k[:i]
	}
	c.err = e
}

func (c *checker) pos(key string) (int, int, bool) {
	path, err := yaml.PathString("$." + key)
	if err != nil {
		return 0, 0, false
	}
	n, err := path.FilterFile(c.file)
	if err != nil || n == nil {
		return 0, 0, false
	}
	tk := n.GetToken()
	if tk == nil || tk.Position == nil {
		return 0, 0, false
	}
	return tk.Position.Line, tk.Position.Column, true
}

func (c *checker) duration(key, s string, def time.Duration) time.Duration {
	if s == "" {
		return def
	}
	d, err := time.ParseDuration(s)
	if err != nil || d <= 0 {
		c.fail(key, "%q: expected a positive duration such as 500ms or 2s", s)
		return def
	}
	if d < MinDuration || d > MaxDuration {
		c.fail(key, "%q: expected %v to %v", s, MinDuration, MaxDuration)
		return def
	}
	return d
}

// text checks the length of a string value.
func (c *checker) text(key, s string, limit int) {
	if len(s) > limit {
		c.fail(key, "%d bytes: expected at most %d", len(s), limit)
	}
}

// count checks the length of a list.
func (c *checker) count(key string, n, limit int) {
	if n > limit {
		c.fail(key, "%d entries: expected at most %d", n, limit)
	}
}

func (c *checker) regexp(key, s string, required ...string) *regexp.Regexp {
	if s == "" {
		c.fail(key, "missing: expected a regular expression")
		return nil
	}
	if len(s) > MaxPattern {
		c.fail(key, "%d bytes: expected a regular expression of at most %d", len(s), MaxPattern)
		return nil
	}
	re, err := regexp.Compile(s)
	if err != nil {
		c.fail(key, "invalid regular expression: %v", err)
		return nil
	}
	for _, g := range required {
		if re.SubexpIndex(g) < 0 {
			c.fail(key, "expected a named group (?P<%s>...)", g)
			return nil
		}
	}
	return re
}

func (c *checker) build(fp *fileProfile) *Profile {
	p := &Profile{Name: fp.Name, Maker: fp.Maker, Model: fp.Model}
	c.text("name", fp.Name, MaxName)
	c.text("maker", fp.Maker, MaxName)
	c.text("model", fp.Model, MaxName)
	if p.Name == "" {
		p.Name = strings.TrimSpace(fp.Maker + " " + fp.Model)
	}
	if p.Name == "" {
		p.Name = strings.TrimSuffix(filepath.Base(c.name), filepath.Ext(c.name))
	}
	switch q := units.Quantity(fp.Quantity); q {
	case units.AirKermaRate, units.AirKerma, units.Luminance:
		p.Quantity = q
	case "":
		c.fail("quantity", "missing: expected air_kerma_rate, air_kerma or luminance")
	default:
		c.fail("quantity", "%q: expected air_kerma_rate, air_kerma or luminance", fp.Quantity)
	}

	// Serial settings.
	s := fp.Serial
	p.Line = serialline.Config{Baud: s.Baud, DataBits: s.DataBits, Parity: s.Parity, StopBits: s.StopBits, Flow: s.FlowControl, MaxLine: s.LongestLine}
	if s.Baud == 0 {
		c.fail("serial.baud", "missing: expected the baud rate, such as 9600")
	}
	for _, f := range []struct {
		key, val string
		dst      *serialline.Framing
	}{{"serial.send_line_end", s.SendEnd, &p.Line.SendEnd}, {"serial.receive_line_end", s.ReceiveEnd, &p.Line.ReceiveEnd}} {
		if f.val == "" {
			c.fail(f.key, "missing: expected cr, lf or crlf")
			continue
		}
		fr, err := serialline.ParseFraming(f.val)
		if err != nil {
			c.fail(f.key, "%v", err)
		}
		*f.dst = fr
	}
	if s.LongestLine < 0 || s.LongestLine > MaxLongestLine {
		c.fail("serial.longest_line", "%d: expected 1 to %d bytes", s.LongestLine, MaxLongestLine)
	}
	probe := p.Line
	probe.Port = "probe"
	if err := probe.Validate(); err != nil && c.err == nil {
		key := "serial"
		msg := strings.TrimPrefix(err.Error(), "serial port probe: ")
		switch {
		case strings.HasPrefix(msg, "baud"):
			key = "serial.baud"
		case strings.HasPrefix(msg, "data bits"):
			key = "serial.data_bits"
		case strings.HasPrefix(msg, "parity"):
			key = "serial.parity"
		case strings.HasPrefix(msg, "stop bits"):
			key = "serial.stop_bits"
		case strings.HasPrefix(msg, "flow"):
			key = "serial.flow_control"
		}
		c.fail(key, "%s", msg)
	}

	// Identification.
	if id := fp.Identify; id != nil {
		if id.Send == "" {
			c.fail("identify.send", "missing: expected the identification command")
		}
		if id.Expect != "" {
			c.fail("identify.expect", "not used here: give the reply pattern as identify.reply")
		}
		c.text("identify.send", id.Send, MaxCommand)
		p.Identify = id.Send
		p.IdentifyPattern = c.regexp("identify.reply", id.Reply)
		if re := p.IdentifyPattern; re != nil {
			for _, g := range re.SubexpNames()[1:] {
				switch g {
				case "", "maker", "model", "serial", "firmware":
				default:
					c.fail("identify.reply", "named group %q: expected maker, model, serial or firmware", g)
				}
			}
		}
	}
	c.count("setup", len(fp.Setup), MaxSetup)
	for i, x := range fp.Setup {
		key := fmt.Sprintf("setup[%d]", i)
		c.text(key+".send", x.Send, MaxCommand)
		c.text(key+".expect", x.Expect, serialline.MaxLineLimit)
		if x.Send == "" {
			c.fail(key+".send", "missing: expected a command to send")
		}
		if x.Reply != "" {
			c.fail(key+".reply", "not used here: give the exact reply as expect")
		}
		p.Setup = append(p.Setup, Exchange{Send: x.Send, Expect: x.Expect})
	}

	// Reading.
	r := fp.Reading
	p.ReplyTimeout = c.duration("reading.reply_timeout", r.ReplyTimeout, time.Second)
	switch Mode(r.Mode) {
	case Polled:
		p.Mode = Polled
		if r.Send == "" {
			c.fail("reading.send", "missing: a polled meter needs the query command")
		}
		if r.Start != nil || r.Stop != "" || r.SilentPeriods != 0 {
			c.fail("reading", "start, stop and silent_periods are for mode: streaming")
		}
		c.text("reading.send", r.Send, MaxCommand)
		p.Query = r.Send
		// How often the meter updates its reading: it is not asked more
		// often (asking faster returns the same value again, which would
		// pass repeated values off as independent samples).
		p.Period = c.duration("reading.period", r.Period, 100*time.Millisecond)
	case Streaming:
		p.Mode = Streaming
		if r.Send != "" {
			c.fail("reading.send", "not used in mode: streaming (give the start command as reading.start.send)")
		}
		// A meter that streams unprompted has no start command.
		if r.Start != nil {
			if r.Start.Send == "" {
				c.fail("reading.start.send", "missing: give the command that starts the stream, or leave reading.start out for a meter that streams by itself")
			}
			if r.Start.Reply != "" {
				c.fail("reading.start.reply", "not used here: give the exact acknowledgement as expect")
			}
			c.text("reading.start.send", r.Start.Send, MaxCommand)
			c.text("reading.start.expect", r.Start.Expect, serialline.MaxLineLimit)
			p.Start = Exchange{Send: r.Start.Send, Expect: r.Start.Expect}
		}
		c.text("reading.stop", r.Stop, MaxCommand)
		p.Stop = r.Stop
		if r.Period == "" {
			c.fail("reading.period", "missing: expected the streaming interval, such as 100ms")
		}
		p.Period = c.duration("reading.period", r.Period, 100*time.Millisecond)
		p.SilentPeriods = r.SilentPeriods
		if r.SilentPeriods == 0 {
			p.SilentPeriods = 5
		} else if r.SilentPeriods < 1 || r.SilentPeriods > MaxSilentPeriods {
			c.fail("reading.silent_periods", "%d: expected a whole number of periods, 1 to %d", r.SilentPeriods, MaxSilentPeriods)
		}
	case "":
		c.fail("reading.mode", "missing: expected polled or streaming")
	default:
		c.fail("reading.mode", "%q: expected polled or streaming", r.Mode)
	}
	p.Pattern = c.regexp("reading.reply", r.Reply, "value")
	if p.Pattern != nil {
		p.valueIdx = p.Pattern.SubexpIndex("value")
		p.unitIdx = p.Pattern.SubexpIndex("unit")
		p.statusIdx = p.Pattern.SubexpIndex("status")
		for _, g := range p.Pattern.SubexpNames()[1:] {
			switch g {
			case "", "value", "unit", "status":
			default:
				c.fail("reading.reply", "named group %q: expected value, unit or status", g)
			}
		}
		if p.unitIdx < 0 && r.Unit == "" {
			c.fail("reading.unit", "missing: the reply pattern has no (?P<unit>...) group, so give the unit the meter reads in")
		}
		if p.unitIdx >= 0 && r.Unit != "" {
			c.fail("reading.unit", "not used: the reply pattern has a (?P<unit>...) group")
		}
		// The status group may be optional in the pattern (a status word
		// printed in place of the value or unit): absent means ok, so
		// status.ok may be empty, but some token must be listed.
		if p.statusIdx >= 0 && len(fp.Status.OK)+len(fp.Status.OverRange)+len(fp.Status.UnderRange)+len(fp.Status.Fault) == 0 {
			c.fail("status", "missing: the reply pattern has a (?P<status>...) group, so list the tokens the meter prints (status.ok, status.over_range, ...)")
		}
		if p.statusIdx < 0 && (len(fp.Status.OK)+len(fp.Status.OverRange)+len(fp.Status.UnderRange)+len(fp.Status.Fault)) > 0 {
			c.fail("status", "not used: the reply pattern has no (?P<status>...) group")
		}
	}
	p.FixedUnit = r.Unit

	// Units.
	if len(fp.Units) == 0 {
		c.fail("units", "missing: list the units the meter may print, such as [uGy/s]")
	}
	c.count("units", len(fp.Units), MaxUnits)
	for i, u := range fp.Units {
		if q, err := units.QuantityOf(u); err != nil || (p.Quantity != "" && q != p.Quantity) {
			c.fail(fmt.Sprintf("units[%d]", i), "%q: expected a unit of %s (convertible to %s)", u, p.Quantity, units.Canonical(p.Quantity))
		}
	}
	p.Units = append([]string(nil), fp.Units...)
	if p.FixedUnit != "" && !p.listsUnit(p.FixedUnit) {
		c.fail("reading.unit", "%q: expected one of the listed units", p.FixedUnit)
	}

	// Numbers.
	n := fp.Numbers
	p.Numbers = Numbers{DecimalMark: '.', Sign: SignOptional, Exponent: ExponentOptional}
	if n.DecimalMark != nil {
		switch *n.DecimalMark {
		case ".", ",":
			p.Numbers.DecimalMark = (*n.DecimalMark)[0]
		default:
			c.fail("numbers.decimal_mark", "%q: expected \".\" or \",\"", *n.DecimalMark)
		}
	}
	if n.ThousandsMark != nil {
		switch *n.ThousandsMark {
		case "":
		case ",", ".", " ", "'":
			p.Numbers.ThousandsMark = (*n.ThousandsMark)[0]
			if p.Numbers.ThousandsMark == p.Numbers.DecimalMark {
				c.fail("numbers.thousands_mark", "%q: must differ from the decimal mark", *n.ThousandsMark)
			}
		default:
			c.fail("numbers.thousands_mark", "%q: expected \"\", \",\", \".\", \" \" or \"'\"", *n.ThousandsMark)
		}
	}
	switch Sign(n.Sign) {
	case "":
	case SignOptional, SignRequired, SignNone:
		p.Numbers.Sign = Sign(n.Sign)
	default:
		c.fail("numbers.sign", "%q: expected optional, required or none", n.Sign)
	}
	switch Exponent(n.Exponent) {
	case "":
	case ExponentOptional, ExponentRequired, ExponentNone:
		p.Numbers.Exponent = Exponent(n.Exponent)
	default:
		c.fail("numbers.exponent", "%q: expected optional, required or none", n.Exponent)
	}

	// Status tokens.
	p.Statuses = map[string]drivers.Status{}
	for _, g := range []struct {
		key  string
		toks []string
		st   drivers.Status
	}{{"status.ok", fp.Status.OK, drivers.StatusOK}, {"status.over_range", fp.Status.OverRange, drivers.StatusOverRange}, {"status.under_range", fp.Status.UnderRange, drivers.StatusUnderRange}, {"status.fault", fp.Status.Fault, drivers.StatusFault}} {
		c.count(g.key, len(g.toks), MaxTokens)
		for i, tok := range g.toks {
			key := g.key + "[" + strconv.Itoa(i) + "]"
			c.text(key, tok, MaxToken)
			if tok == "" {
				c.fail(key, "empty status token")
			}
			if prev, dup := p.Statuses[tok]; dup {
				c.fail(key, "%q is already listed under %s", tok, prev)
			}
			p.Statuses[tok] = g.st
		}
	}
	return p
}
