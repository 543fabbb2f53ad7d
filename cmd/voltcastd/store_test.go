package main

import (
	"context"
	"crypto/rand"
	"database/sql"
	"encoding/hex"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	_ "github.com/jackc/pgx/v5/stdlib" // the "pgx" database/sql driver

	"github.com/voltcast/voltcast/service/store"
	"github.com/voltcast/voltcast/service/store/sqlite"
)

// startServer runs voltcastd in-process with args (plus kernel-chosen ports) and
// returns the HTTP base URL and a stop function that waits for a clean shutdown.
func startServer(t *testing.T, args ...string) (string, func()) {
	t.Helper()
	ctx, cancel := context.WithCancel(context.Background())
	ready := make(chan string, 1)
	done := make(chan error, 1)
	go func() {
		done <- run(ctx, append([]string{"--grpc-address", "127.0.0.1:0", "--http-address", "127.0.0.1:0", "--log-level", "warn"}, args...),
			io.Discard, t.Output(), env(nil), func(_, h string) { ready <- h })
	}()
	select {
	case h := <-ready:
		return "http://" + h, func() {
			cancel()
			select {
			case err := <-done:
				if err != nil {
					t.Errorf("run() = %v; want a clean shutdown", err)
				}
			case <-time.After(20 * time.Second):
				t.Fatal("server did not stop")
			}
		}
	case err := <-done:
		cancel()
		t.Fatalf("run ended early: %v", err)
	case <-time.After(20 * time.Second):
		cancel()
		t.Fatal("server did not start")
	}
	return "", nil
}

func httpDo(t *testing.T, method, url, body string) (int, string) {
	t.Helper()
	req, err := http.NewRequest(method, url, strings.NewReader(body))
	if err != nil {
		t.Fatal(err)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp.StatusCode, string(b)
}

// TestRunPostgres serves from PostgreSQL (--store=postgres) in a fresh schema: a
// battery created through REST is there after a restart. It needs the server that
// VOLTCAST_TEST_POSTGRES_DSN names and skips without it, unless
// VOLTCAST_REQUIRE_POSTGRES=1 (as the store's own tests do).
func TestRunPostgres(t *testing.T) {
	dsn := os.Getenv("VOLTCAST_TEST_POSTGRES_DSN")
	why := ""
	var admin *sql.DB
	if dsn == "" {
		why = "VOLTCAST_TEST_POSTGRES_DSN is not set"
	} else {
		var err error
		if admin, err = sql.Open("pgx", dsn); err == nil {
			ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
			err = admin.PingContext(ctx)
			cancel()
		}
		if err != nil {
			why = "server at VOLTCAST_TEST_POSTGRES_DSN does not answer: " + err.Error()
		} else {
			defer admin.Close()
		}
	}
	if why != "" {
		if os.Getenv("VOLTCAST_REQUIRE_POSTGRES") == "1" {
			t.Fatalf("PostgreSQL is required (VOLTCAST_REQUIRE_POSTGRES=1) but %s", why)
		}
		t.Skipf("skipping: %s (e.g. postgres://root@127.0.0.1:5432/test?sslmode=disable)", why)
	}
	var b [8]byte
	rand.Read(b[:])
	schema := "voltcast_cmd_" + hex.EncodeToString(b[:])
	if _, err := admin.Exec("CREATE SCHEMA " + schema); err != nil {
		t.Fatal(err)
	}
	defer admin.Exec("DROP SCHEMA " + schema + " CASCADE")
	sep := "?"
	if strings.Contains(dsn, "?") {
		sep = "&"
	}
	args := []string{"--store", "postgres", "--store-dsn", dsn + sep + "search_path=" + schema}

	base, stop := startServer(t, args...)
	if code, body := httpDo(t, "GET", base+"/healthz", ""); code != http.StatusOK || !strings.Contains(body, "SERVING") {
		t.Errorf("/healthz = %d %s", code, body)
	}
	if code, body := httpDo(t, "POST", base+"/v1/batteries?batteryId=cart-1", `{"batteryType":"batteryTypes/generic-lfp-26650","seriesCount":4,"parallelCount":1}`); code != http.StatusOK {
		t.Fatalf("create = %d %s", code, body)
	}
	stop()
	base, stop = startServer(t, args...)
	defer stop()
	if code, body := httpDo(t, "GET", base+"/v1/batteries/cart-1", ""); code != http.StatusOK || !strings.Contains(body, `"seriesCount": 4`) && !strings.Contains(body, `"seriesCount":4`) {
		t.Errorf("after a restart: GET = %d %s", code, body)
	}
}

// TestRunFailsLeftoverCalibrations: a calibration the previous process left RUNNING
// in the embedded store cannot still run (its data died with that process), so the
// next start marks it FAILED with reason WORKER_LOST.
func TestRunFailsLeftoverCalibrations(t *testing.T) {
	dir := t.TempDir()
	st, err := sqlite.Open(context.Background(), filepath.Join(dir, "voltcast.db"), nil)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := st.CreateCalibration(context.Background(), store.DefaultTenant, store.Calibration{ID: "cal-left", Status: store.CalibrationRunning}, ""); err != nil {
		t.Fatal(err)
	}
	st.Close()
	base, stop := startServer(t, "--data-dir", dir)
	defer stop()
	code, body := httpDo(t, "GET", base+"/v1/calibrations/cal-left", "")
	if code != http.StatusOK || !strings.Contains(body, "CALIBRATION_STATE_FAILED") || !strings.Contains(body, "WORKER_LOST") {
		t.Errorf("leftover calibration after a restart: %d %s; want FAILED, WORKER_LOST", code, body)
	}
}
