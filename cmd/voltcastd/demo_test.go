package main

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"strings"
	"testing"
	"time"
)

// TestRunDemo is the newcomer's first minute: voltcastd --demo on an empty data
// directory serves the demo fleet over REST with state-of-charge estimates, answers a
// runtime forecast for one of its batteries, and still shuts down cleanly.
func TestRunDemo(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	ready := make(chan string, 1)
	done := make(chan error, 1)
	go func() {
		done <- run(ctx, []string{"--grpc-address", "127.0.0.1:0", "--http-address", "127.0.0.1:0", "--data-dir", t.TempDir(), "--demo", "--log-level", "warn"},
			io.Discard, t.Output(), env(nil), func(_, h string) { ready <- h })
	}()
	var base string
	select {
	case h := <-ready:
		base = "http://" + h
	case err := <-done:
		t.Fatalf("run ended early: %v", err)
	case <-time.After(20 * time.Second):
		t.Fatal("server did not start")
	}

	type battery struct {
		Name  string
		State struct {
			Initialized    bool
			StateOfCharge  float64
			LastSampleTime string
		}
	}
	var list struct{ Batteries []battery }
	deadline := time.Now().Add(30 * time.Second)
	for {
		resp, err := http.Get(base + "/v1/batteries")
		if err != nil {
			t.Fatal(err)
		}
		list.Batteries = nil
		err = json.NewDecoder(resp.Body).Decode(&list)
		resp.Body.Close()
		if err != nil {
			t.Fatalf("GET /v1/batteries: %v", err)
		}
		n := 0
		for _, b := range list.Batteries {
			if b.State.Initialized && b.State.LastSampleTime != "" {
				n++
			}
		}
		if len(list.Batteries) > 0 && n == len(list.Batteries) {
			break
		}
		if time.Now().After(deadline) {
			t.Fatalf("after 30 s, %d of %d demo batteries have an estimate", n, len(list.Batteries))
		}
		time.Sleep(50 * time.Millisecond)
	}
	if len(list.Batteries) < 3 {
		t.Errorf("the demo fleet has %d batteries; want several", len(list.Batteries))
	}
	for _, b := range list.Batteries {
		if soc := b.State.StateOfCharge; !(soc >= 0 && soc <= 1) {
			t.Errorf("%s: state of charge %g; want a fraction", b.Name, soc)
		}
	}

	name := list.Batteries[0].Name
	resp, err := http.Post(base+"/v1/"+name+":forecastRuntime", "application/json", strings.NewReader(`{"load":{"currentAmps":1}}`))
	if err != nil {
		t.Fatal(err)
	}
	var fc struct {
		Runtime   string
		EndReason string
	}
	err = json.NewDecoder(resp.Body).Decode(&fc)
	resp.Body.Close()
	if err != nil || resp.StatusCode != http.StatusOK || fc.Runtime == "" || fc.EndReason == "" {
		t.Errorf("POST /v1/%s:forecastRuntime = %d %+v, %v; want a forecast", name, resp.StatusCode, fc, err)
	}

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
