package main

import (
	"os/exec"
	"strings"
	"testing"
)

// TestBoardBuildLinksNoStore: the board build (-tags board) links the
// push side of sync only: neither the workstation store (nor its database
// drivers for PostgreSQL) nor the receiver (issue 11).
func TestBoardBuildLinksNoStore(t *testing.T) {
	if testing.Short() {
		t.Skip("runs go list")
	}
	out, err := exec.Command("go", "list", "-deps", "-tags", "board", ".").CombinedOutput()
	if err != nil {
		t.Fatalf("go list: %v\n%s", err, out)
	}
	deps := strings.Fields(string(out))
	has := map[string]bool{}
	for _, d := range deps {
		has[d] = true
	}
	for _, want := range []string{"kermalux/firmware-host/journal/transfer/push", "kermalux/firmware-host/journal/transfer/wire"} {
		if !has[want] {
			t.Errorf("the board build does not link %s: the test looks at the wrong list", want)
		}
	}
	for _, d := range deps {
		for _, banned := range []string{"kermalux/firmware-host/journal/store", "kermalux/firmware-host/journal/transfer/receive", "github.com/jackc/pgx"} {
			if d == banned || strings.HasPrefix(d, banned+"/") {
				t.Errorf("the board build links %s", d)
			}
		}
	}
}
