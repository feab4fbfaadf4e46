package live

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"strconv"
	"strings"

	"kermalux/drivers/clock"
	"kermalux/procedures/engine"
	"kermalux/procedures/panel"
)

// View is the live view as a command wires it in: a listener opened
// first (so a busy or wrong address stops the command before any meter is
// opened), the tees around the engine's journal and panel, and the server
// on that listener.
type View struct {
	ln   net.Listener
	hub  *Hub
	srv  *Server
	opts Options
	done chan error
}

// ErrBadAddress: the live view's address is not HOST:PORT.
var ErrBadAddress = errors.New("want HOST:PORT or :PORT, for example :8471")

// Listen opens addr (host:port; ":8471" listens on every interface) for
// the live view. Nothing is served until Wrap and Start.
func Listen(addr string, o Options) (*View, error) {
	if _, _, err := net.SplitHostPort(addr); err != nil {
		return nil, fmt.Errorf("live view address %q: %w (%w)", addr, ErrBadAddress, err)
	}
	ln, err := net.Listen("tcp", addr)
	if err != nil {
		return nil, fmt.Errorf("live view on %s: %w", addr, err)
	}
	if o.Log == nil {
		o.Log = slog.Default()
	}
	return &View{ln: ln, hub: NewHub(0), opts: o}, nil
}

// Wrap returns the engine's journal and panel with the live view's tees,
// and makes the server that shows what they publish.
func (v *View) Wrap(j engine.Journal, p panel.Panel, clk clock.Clock) (engine.Journal, panel.Panel, error) {
	tj := NewJournal(j, v.hub, clk)
	srv, err := NewServer(v.hub, tj, v.opts)
	if err != nil {
		return nil, nil, err
	}
	v.srv = srv
	return tj, NewPanel(p, v.hub, clk), nil
}

// SetProcedure tells the page which procedure runs.
func (v *View) SetProcedure(p engine.Procedure) {
	if v.srv != nil {
		v.srv.SetProcedure(p)
	}
}

// Start serves until ctx is done; Wait returns the server's error.
func (v *View) Start(ctx context.Context) error {
	if v.srv == nil {
		return fmt.Errorf("live view on %s: Wrap must come before Start", v.ln.Addr())
	}
	v.done = make(chan error, 1)
	go func() { v.done <- v.srv.Serve(ctx, v.ln) }()
	return nil
}

// Wait waits for the server started by Start to end (after its context).
func (v *View) Wait() error {
	if v.done == nil {
		return v.ln.Close()
	}
	return <-v.done
}

// Close closes the listener (a View never started).
func (v *View) Close() error {
	if v.done == nil {
		return v.ln.Close()
	}
	return nil
}

// Addr is the address listened on (with the port chosen for ":0").
func (v *View) Addr() net.Addr { return v.ln.Addr() }

// URLs are the addresses a browser on the board's link can open: the host
// listened on, or, for an unspecified host (":8471"), each of the
// machine's own non-loopback IPv4 addresses (and the loopback one when it
// has no other).
func (v *View) URLs() []string {
	tcp, ok := v.ln.Addr().(*net.TCPAddr)
	if !ok {
		return []string{"http://" + v.ln.Addr().String() + "/"}
	}
	port := strconv.Itoa(tcp.Port)
	if !tcp.IP.IsUnspecified() {
		return []string{"http://" + net.JoinHostPort(tcp.IP.String(), port) + "/"}
	}
	var out []string
	if addrs, err := net.InterfaceAddrs(); err == nil {
		for _, a := range addrs {
			n, ok := a.(*net.IPNet)
			if !ok || n.IP.IsLoopback() || n.IP.To4() == nil || n.IP.IsLinkLocalUnicast() {
				continue
			}
			out = append(out, "http://"+net.JoinHostPort(n.IP.String(), port)+"/")
		}
	}
	if len(out) == 0 {
		out = append(out, "http://"+net.JoinHostPort("127.0.0.1", port)+"/")
	}
	return out
}

// Announcement is what the board says and shows when the live view starts:
// the pairing code, digit by digit so that it is heard clearly, and where
// to open the page ("192.168.4.1 port 8471"). It never holds the token.
func (v *View) Announcement() panel.Message {
	// Only the whole sentence is a catalogued format: "port" and "or" are
	// words looked up alone, so that no loose format ("%s or %s") can
	// match some other text.
	m := v.opts.Messages
	var where []string
	for _, u := range v.URLs() {
		host, port, err := net.SplitHostPort(strings.TrimSuffix(strings.TrimPrefix(u, "http://"), "/"))
		if err == nil {
			where = append(where, host+" "+m.Text("port")+" "+port)
		}
	}
	tf := func(format string, a ...any) string { return fmt.Sprintf(m.Text(format), a...) }
	return panel.Message{Text: tf("Live view on. Pairing code %s. Open %s in a browser.", v.srv.SpokenCode(), strings.Join(where, " "+m.Text("or")+" ")), Level: panel.Info}
}

// Printed is the text printed once on standard error at start: the
// addresses, the pairing code, and the token link that pairs a browser
// without the code. Whoever holds the token link sees the session, so it
// is printed once and never spoken, shown or journalled.
// It is in the board's language, as everything the board shows.
func (v *View) Printed() string {
	m := v.opts.Messages
	tf := func(format string, a ...any) string { return fmt.Sprintf(m.Text(format), a...) }
	var b strings.Builder
	fmt.Fprintln(&b, tf("live view: listening on %s (read-only; unencrypted HTTP: connect over the instrument's own direct link, not a shared network)", v.ln.Addr()))
	fmt.Fprintln(&b, tf("live view: open %s and enter the pairing code %s (spoken and shown at start)", strings.Join(v.URLs(), " "+m.Text("or")+" "), v.srv.Code()))
	fmt.Fprintln(&b, tf("live view: or pair with this link, printed once (keep it private): %s?token=%s", v.URLs()[0], v.srv.Token()))
	return b.String()
}
