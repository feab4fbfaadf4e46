package main

import (
	"bufio"
	"os"
	"strings"
	"testing"
)

// TestBootServiceTakesTheLiveFlag: the boot service's command line, with
// the live view switched on as firmware-host/board/kermalux.default shows
// (its commented KERMALUX_RUN_FLAGS line), is a valid `kermalux run`
// command line that serves the live view on the port given. systemd
// splits an unbraced $VAR on white space (systemd.service(5), "Command
// lines"), as strings.Fields does here.
func TestBootServiceTakesTheLiveFlag(t *testing.T) {
	exec := ""
	for _, l := range lines(t, "../../firmware-host/board/kermalux.service") {
		if v, ok := strings.CutPrefix(l, "ExecStart="); ok {
			exec = v
		}
	}
	flags := ""
	for _, l := range lines(t, "../../firmware-host/board/kermalux.default") {
		if v, ok := strings.CutPrefix(l, "#KERMALUX_RUN_FLAGS="); ok {
			flags = strings.Trim(v, `"`)
		}
	}
	if !strings.Contains(exec, "$KERMALUX_RUN_FLAGS") || flags == "" {
		t.Fatalf("ExecStart %q does not take $KERMALUX_RUN_FLAGS, or the example sets none (%q)", exec, flags)
	}
	words := strings.Fields(strings.Replace(exec, "$KERMALUX_RUN_FLAGS", flags, 1))
	if len(words) < 2 || !strings.HasSuffix(words[0], "/kermalux") {
		t.Fatalf("ExecStart %q", exec)
	}
	resetFlags(root)
	cmd, rest, err := root.Find(words[1:])
	if err != nil || cmd.Name() != "run" {
		t.Fatalf("ExecStart %q: %v (command %q)", exec, err, cmd.Name())
	}
	if err := cmd.ParseFlags(rest); err != nil {
		t.Fatalf("ExecStart with %s: %v", flags, err)
	}
	if v, _ := cmd.Flags().GetString("live"); v != ":8471" {
		t.Errorf("--live is %q with the example's flags %q", v, flags)
	}
	if v, _ := cmd.Flags().GetBool("standby"); !v {
		t.Errorf("the boot service does not run in standby")
	}
	// Without the file (EnvironmentFile=-), $KERMALUX_RUN_FLAGS is empty and
	// the command line is the one without the live view.
	resetFlags(root)
	words = strings.Fields(strings.Replace(exec, "$KERMALUX_RUN_FLAGS", "", 1))
	cmd, rest, _ = root.Find(words[1:])
	if err := cmd.ParseFlags(rest); err != nil {
		t.Fatal(err)
	}
	if v, _ := cmd.Flags().GetString("live"); v != "" {
		t.Errorf("--live is %q without the environment file", v)
	}
}

func lines(t *testing.T, path string) []string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var out []string
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		out = append(out, strings.TrimSpace(sc.Text()))
	}
	return out
}
