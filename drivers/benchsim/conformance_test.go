package benchsim

import (
	"context"
	"os"
	"os/exec"
	"strings"
	"testing"
	"time"
)

// python3 finds a Python with PyVISA and pyvisa-py: Debian's
// /usr/bin/python3 first (where python3-pyvisa installs), then the PATH's.
func pyvisaPython() string {
	for _, py := range []string{"/usr/bin/python3", "python3"} {
		if path, err := exec.LookPath(py); err == nil {
			if exec.Command(path, "-c", "import pyvisa, pyvisa_py, serial").Run() == nil {
				return path
			}
		}
	}
	return ""
}

// The simulated SCPI dosimeter driven by a third-party SCPI client
// (PyVISA with its pure-Python backend, Debian's python3-pyvisa and
// python3-pyvisa-py): common commands, error-queue rules, one response for
// several queries, -410 and -363 (testdata/pyvisa_conformance.py names the
// clauses). CI sets KERMALUX_REQUIRE_PYVISA=1, so there it must run.
func TestSCPIConformancePyVISA(t *testing.T) {
	py := pyvisaPython()
	if py == "" {
		if os.Getenv("KERMALUX_REQUIRE_PYVISA") != "" {
			t.Fatal("KERMALUX_REQUIRE_PYVISA is set but no python3 with pyvisa, pyvisa_py and serial was found (apt-get install python3-pyvisa python3-pyvisa-py python3-serial)")
		}
		t.Skip("python3-pyvisa and python3-pyvisa-py are not installed (set KERMALUX_REQUIRE_PYVISA=1 to make this an error)")
	}
	r := startRig(t, "pelverton-pulsed-scpi.yaml", 1, nil)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	cmd := exec.CommandContext(ctx, py, "testdata/pyvisa_conformance.py", r.ports.Dosimeter.Device)
	out, err := cmd.CombinedOutput()
	t.Logf("%s", out)
	if err != nil || !strings.Contains(string(out), "PASS ") {
		t.Fatalf("pyvisa conformance: %v", err)
	}
}
