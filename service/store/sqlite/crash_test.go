package sqlite

import (
	"bufio"
	"encoding/json"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/voltcast/voltcast/service/store"
)

const crashChildEnv = "VOLTCAST_SQLITE_CRASH_CHILD"

// TestCrashKeepsAcknowledgedWrites kills a process (SIGKILL, no Close) while it
// writes states as fast as it can, then reopens the file: every write the process
// saw acknowledged is there, and the stored state is whole (its blob and its
// watermark come from the same write). This is the process-crash half of the claim in
// the package doc of store; a power cut cannot be simulated here.
func TestCrashKeepsAcknowledgedWrites(t *testing.T) {
	if path := os.Getenv(crashChildEnv); path != "" {
		crashChild(t, path)
		return
	}
	path := filepath.Join(t.TempDir(), "crash.db")
	s := openPath(t, path)
	if _, err := s.CreateBattery(t.Context(), store.DefaultTenant, store.Battery{ID: "bike-1", TypeName: "generic-nmc-18650", Series: 1, Parallel: 1}, ""); err != nil {
		t.Fatal(err)
	}

	cmd := exec.Command(os.Args[0], "-test.run=^TestCrashKeepsAcknowledgedWrites$", "-test.count=1")
	cmd.Env = append(os.Environ(), crashChildEnv+"="+path)
	out, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	cmd.Stderr = os.Stderr
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	lines := bufio.NewScanner(out)
	var lastN int
	var lastVersion int64
	for lines.Scan() && lastN < 200 {
		f := strings.Fields(lines.Text())
		if len(f) != 3 || f[0] != "acked" {
			continue
		}
		lastN, _ = strconv.Atoi(f[1])
		lastVersion, _ = strconv.ParseInt(f[2], 10, 64)
	}
	if err := cmd.Process.Kill(); err != nil {
		t.Fatalf("kill: %v", err)
	}
	cmd.Wait()
	if lastN < 200 {
		t.Fatalf("child acknowledged only %d writes before its output ended", lastN)
	}

	st, err := s.GetState(t.Context(), store.DefaultTenant, "bike-1")
	if err != nil {
		t.Fatalf("GetState after crash: %v", err)
	}
	var blob struct{ N int }
	if err := json.Unmarshal(st.Estimator, &blob); err != nil {
		t.Fatalf("state blob after crash %q: %v", st.Estimator, err)
	}
	if blob.N < lastN || (blob.N == lastN && st.Version != lastVersion) {
		t.Errorf("after crash: write %d at version %d; want at least acknowledged write %d (version %d)",
			blob.N, st.Version, lastN, lastVersion)
	}
	if st.Watermark.Sequence != int64(blob.N) {
		t.Errorf("after crash: blob of write %d with watermark %d; want them from one write", blob.N, st.Watermark.Sequence)
	}
	// The file is still a working store: the next write succeeds.
	if _, err := s.PutState(t.Context(), store.DefaultTenant, "bike-1", st.Version, crashState(blob.N+1)); err != nil {
		t.Errorf("PutState after crash: %v", err)
	}
}

func crashState(n int) store.State {
	return store.State{
		Estimator: []byte(fmt.Sprintf(`{"n": %d}`, n)),
		Summary:   store.Summary{SOC: 0.5, CapacityFactor: 1, ResistanceFactor: 1},
		Watermark: store.Watermark{Sequence: int64(n), Time: time.Unix(int64(n), 0)},
	}
}

// crashChild writes states until it is killed, printing each acknowledged one.
func crashChild(t *testing.T, path string) {
	s, err := Open(t.Context(), path, nil)
	if err != nil {
		t.Fatalf("child Open: %v", err)
	}
	version := store.AnyVersion
	deadline := time.Now().Add(time.Minute) // in case the parent dies first
	for n := 1; time.Now().Before(deadline); n++ {
		v, err := s.PutState(t.Context(), store.DefaultTenant, "bike-1", version, crashState(n))
		if err != nil {
			t.Fatalf("child PutState %d: %v", n, err)
		}
		version = v
		fmt.Fprintf(os.Stdout, "acked %d %d\n", n, v)
	}
}
