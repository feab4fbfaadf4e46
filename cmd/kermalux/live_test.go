package main

import (
	"bufio"
	"bytes"
	"context"
	"io"
	"net"
	"net/http"
	"net/http/cookiejar"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"

	"kermalux/drivers/benchsim"
	"kermalux/drivers/clock"
)

// syncBuffer is a bytes.Buffer safe for a writer and a reader at once;
// Wrote tells of each write.
type syncBuffer struct {
	mu    sync.Mutex
	b     bytes.Buffer
	wrote chan struct{}
	once  sync.Once
}

func (s *syncBuffer) init() { s.once.Do(func() { s.wrote = make(chan struct{}, 1) }) }

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.init()
	s.mu.Lock()
	defer s.mu.Unlock()
	n, err := s.b.Write(p)
	select {
	case s.wrote <- struct{}{}:
	default:
	}
	return n, err
}

// Wrote is signalled after writes (several writes may share one signal).
func (s *syncBuffer) Wrote() <-chan struct{} {
	s.init()
	return s.wrote
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}

// simPorts serves the default scenario's meters on pseudo-terminals.
func simPorts(t *testing.T, ctx context.Context) benchsim.Ports {
	t.Helper()
	scn, err := benchsim.LoadScenario("../../testdata/scenarios/tollemby-rise-room2.yaml")
	if err != nil {
		t.Fatal(err)
	}
	sim, err := benchsim.New(scn, clock.NewReal())
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { sim.Close() })
	ports, err := sim.Serve(ctx, t.TempDir())
	if err != nil {
		if os.IsPermission(err) {
			t.Skip(err)
		}
		t.Fatal(err)
	}
	return ports
}

// TestRunLiveServesPairedPageOnly: `kermalux run --standby --live ADDR`
// serves the live page while the board waits at the ready, says and
// shows the pairing code, prints the token link once, refuses every
// unpaired request and every method but GET, and serves the page and its
// event stream to a browser paired with the code or the token.
func TestRunLiveServesPairedPageOnly(t *testing.T) {
	if testing.Short() {
		t.Skip("pseudo-terminals")
	}
	ctx, cancel := context.WithTimeout(context.Background(), 60*time.Second)
	defer cancel()
	ports := simPorts(t, ctx)
	dir := t.TempDir()
	stdin, press := io.Pipe() // nobody presses: the board stays at the ready
	defer press.Close()
	var errw syncBuffer
	o := runOptions{bench: "../../testdata/bench/demo-sim.yaml", panel: "terminal", out: dir, journal: filepath.Join(dir, "j.db"),
		standby: true, live: "127.0.0.1:0", in: stdin, errw: &errw,
		ports: []string{"dosimeter=" + ports.Dosimeter.Link, "photometer=" + ports.Photometer.Link}}
	rctx, stop := context.WithCancel(ctx)
	done := make(chan error, 1)
	go func() { done <- runRun(rctx, o, "meter-checks") }()

	addrRe := regexp.MustCompile(`live view: listening on (127\.0\.0\.1:\d+)`)
	codeRe := regexp.MustCompile(`enter the pairing code (\d{6})`)
	tokenRe := regexp.MustCompile(`\?token=([0-9a-f]{32})`)
	var addr, code, token string
	for addr == "" || !strings.Contains(errw.String(), "Ready.") {
		select {
		case err := <-done:
			t.Fatalf("run ended before the ready prompt: %v\n%s", err, errw.String())
		case <-errw.Wrote():
		case <-ctx.Done():
			t.Fatalf("no ready prompt with the live view:\n%s", errw.String())
		}
		out := errw.String()
		if m := addrRe.FindStringSubmatch(out); m != nil {
			addr = m[1]
		}
		if m := codeRe.FindStringSubmatch(out); m != nil {
			code = m[1]
		}
		if m := tokenRe.FindStringSubmatch(out); m != nil {
			token = m[1]
		}
	}
	out := errw.String()
	if code == "" || token == "" {
		t.Fatalf("no pairing code or token printed:\n%s", out)
	}
	// The code is said (and shown on the panel) digit by digit; the token
	// is printed once and never said.
	spoken := strings.Join(strings.Split(code, ""), " ")
	if !strings.Contains(out, "Pairing code "+spoken) {
		t.Errorf("the panel did not say the pairing code %q:\n%s", spoken, out)
	}
	if n := strings.Count(out, token); n != 1 {
		t.Errorf("the token appears %d times in the output, want once:\n%s", n, out)
	}
	base := "http://" + addr

	jar, _ := cookiejar.New(nil)
	noFollow := func(*http.Request, []*http.Request) error { return http.ErrUseLastResponse }
	stranger := &http.Client{Timeout: 10 * time.Second, CheckRedirect: noFollow}
	paired := &http.Client{Timeout: 10 * time.Second, CheckRedirect: noFollow, Jar: jar}
	do := func(c *http.Client, method, path string) (*http.Response, string) {
		t.Helper()
		req, _ := http.NewRequestWithContext(ctx, method, base+path, nil)
		resp, err := c.Do(req)
		if err != nil {
			t.Fatalf("%s %s: %v", method, path, err)
		}
		defer resp.Body.Close()
		b, _ := io.ReadAll(io.LimitReader(resp.Body, 1<<20))
		return resp, string(b)
	}

	// Unpaired: the pairing form for the page, nothing for the rest.
	for _, c := range []struct {
		method, path string
		want         int
	}{
		{"GET", "/", http.StatusUnauthorized},
		{"GET", "/events", http.StatusUnauthorized},
		{"GET", "/app.js", http.StatusUnauthorized},
		{"GET", "/?token=" + strings.Repeat("0", 32), http.StatusUnauthorized},
		{"GET", "/pair?code=000000", http.StatusUnauthorized},
		{"POST", "/", http.StatusMethodNotAllowed},
		{"POST", "/pair?code=" + code, http.StatusMethodNotAllowed},
	} {
		resp, body := do(stranger, c.method, c.path)
		if resp.StatusCode != c.want || strings.Contains(body, `id="progress"`) || strings.Contains(body, "Tollemby") {
			t.Errorf("unpaired %s %s: %s (want %d), body %.200q", c.method, c.path, resp.Status, c.want, body)
		}
		if c.path == "/" && c.method == "GET" && !strings.Contains(body, `name="code"`) {
			t.Errorf("unpaired GET /: no pairing form: %.300q", body)
		}
	}

	// Paired with the spoken code: the page and its event stream.
	if resp, _ := do(paired, "GET", "/pair?code="+code); resp.StatusCode != http.StatusSeeOther {
		t.Fatalf("pairing with the code: %s", resp.Status)
	}
	if resp, body := do(paired, "GET", "/"); resp.StatusCode != http.StatusOK || !strings.Contains(body, `id="progress"`) {
		t.Errorf("paired GET /: %s %.200q", resp.Status, body)
	}
	req, _ := http.NewRequestWithContext(ctx, "GET", base+"/events", nil)
	resp, err := paired.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	if ct := resp.Header.Get("Content-Type"); resp.StatusCode != http.StatusOK || ct != "text/event-stream" {
		t.Errorf("paired /events: %s %s", resp.Status, ct)
	}
	line, err := bufio.NewReader(resp.Body).ReadString('\n')
	resp.Body.Close()
	if err != nil || !strings.Contains(line, `"live_hello"`) || !strings.Contains(line, `"procedure":"meter-checks"`) {
		t.Errorf("paired /events first line %q (%v), want the hello naming meter-checks", line, err)
	}

	// Paired with the printed token, in a fresh browser.
	jar2, _ := cookiejar.New(nil)
	second := &http.Client{Timeout: 10 * time.Second, CheckRedirect: noFollow, Jar: jar2}
	if resp, _ := do(second, "GET", "/?token="+token); resp.StatusCode != http.StatusSeeOther {
		t.Errorf("pairing with the token: %s", resp.Status)
	}
	if resp, body := do(second, "GET", "/"); resp.StatusCode != http.StatusOK || !strings.Contains(body, `id="progress"`) {
		t.Errorf("token-paired GET /: %s", resp.Status)
	}

	stop()
	select {
	case <-done:
	case <-time.After(20 * time.Second):
		t.Fatal("run did not stop after its context ended")
	}
	// The live view stops with the run.
	if c, err := net.DialTimeout("tcp", addr, time.Second); err == nil {
		c.Close()
		t.Errorf("the live view still listens on %s after run ended", addr)
	}
}

// TestRunLiveBusyAddress: an address already in use stops run before the
// journal or a meter is opened, naming the address.
func TestRunLiveBusyAddress(t *testing.T) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	dir := t.TempDir()
	jp := filepath.Join(dir, "j.db")
	code, _, errb := runCLI(t, "run", "meter-checks", "--bench", "../../testdata/bench/demo-sim.yaml", "--panel", "terminal",
		"--journal", jp, "--out", dir, "--live", l.Addr().String())
	if code != exitFailure || !strings.Contains(errb, "--live") || !strings.Contains(errb, l.Addr().String()) {
		t.Errorf("run --live on a busy address: exit %d, %s", code, errb)
	}
	if _, err := os.Stat(jp); err == nil {
		t.Errorf("the journal was opened before the live view's address was checked")
	}
	code, _, errb = runCLI(t, "run", "meter-checks", "--bench", "../../testdata/bench/demo-sim.yaml", "--panel", "terminal",
		"--journal", jp, "--out", dir, "--live", "8471")
	if code != exitUsage || !strings.Contains(errb, "HOST:PORT") {
		t.Errorf("run --live 8471: exit %d, %s", code, errb)
	}
}
