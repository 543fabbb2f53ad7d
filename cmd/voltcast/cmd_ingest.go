package main

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"text/tabwriter"
	"time"

	"google.golang.org/protobuf/encoding/protojson"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/labdata"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

func init() {
	register("ingest", command{
		summary: "send a telemetry log CSV to a running server for a stored battery (--server)",
		run:     runIngest,
	})
}

// maxRejectionsShown bounds the rejected samples listed in the output.
const maxRejectionsShown = 10

// ingestRejectionJSON is one rejected sample in the --json output.
type ingestRejectionJSON struct {
	Row            int    `json:"row"` // data row of the file, from 1
	SequenceNumber int64  `json:"sequence_number"`
	Reason         string `json:"reason"`
	Message        string `json:"message"`
}

// ingestJSON is the --json output of voltcast ingest.
type ingestJSON struct {
	Battery   string `json:"battery"`
	Samples   int    `json:"samples"`
	Calls     int    `json:"calls"`
	Applied   int    `json:"applied"`
	Duplicate int    `json:"duplicate"`
	Rejected  int    `json:"rejected"`
	// Rejections lists the first rejected samples (at most 10 here; Rejected counts
	// them all).
	Rejections []ingestRejectionJSON `json:"rejections"`
	// The watermarks after the last call: resend samples above the durable one if the
	// server restarts before persisting.
	AppliedSequenceNumber int64 `json:"applied_sequence_number"`
	DurableSequenceNumber int64 `json:"durable_sequence_number"`
	// State is the battery's state after the last call, as the API's BatteryState.
	State json.RawMessage `json:"state,omitempty"`
}

func runIngest(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("ingest", stderr)
	cf := addClientFlags(fs)
	battery := fs.String("battery", "", "the stored battery, \"batteries/ID\" or ID (required)")
	in := fs.String("in", "", "telemetry log CSV (required): time_s, current_a, voltage_v (pack values), optional temp_cell_c")
	start := fs.String("start-time", "", "the instant time_s = 0 stands for, RFC 3339, e.g. 2025-06-01T08:00:00Z (required; 1970-01-01T00:00:00Z when time_s is Unix time)")
	sign := fs.String("current-sign", "discharge-positive", "current convention of the CSV: discharge-positive or charge-positive")
	celsius := fs.Float64("temperature-celsius", math.NaN(), "temperature, °C, for a log without a temperature column (default: the server keeps the battery's last temperature)")
	chunk := fs.Int("chunk-samples", 10000, "samples per IngestTelemetry call, 1 to 100000")
	asJSON := fs.Bool("json", false, "print JSON instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast ingest --server ADDR --battery NAME --in LOG.csv --start-time RFC3339 [--chunk-samples N] [--json]")
		fmt.Fprintln(stderr, "Sends a log to the server in batched unary calls and reports what was applied, skipped as")
		fmt.Fprintln(stderr, "duplicate and rejected. Current is positive when it leaves the battery (discharge).")
		fmt.Fprintln(stderr, "Each sample's sequence number is its time in microseconds, so sending a log again is harmless:")
		fmt.Fprintln(stderr, "samples at or below the battery's applied watermark are skipped as duplicates.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	switch {
	case *battery == "":
		return fmt.Errorf("%w: --battery is required", errUsage)
	case *in == "":
		return fmt.Errorf("%w: --in is required", errUsage)
	case *start == "":
		return fmt.Errorf("%w: --start-time is required (the instant time_s = 0 stands for)", errUsage)
	case *chunk < 1 || *chunk > 100000:
		return fmt.Errorf("%w: --chunk-samples must be 1 to 100000, got %d", errUsage, *chunk)
	}
	name, err := resourceName("batteries", *battery)
	if err != nil {
		return err
	}
	base, err := time.Parse(time.RFC3339Nano, *start)
	if err != nil {
		return fmt.Errorf("%w: --start-time %q: want RFC 3339, e.g. 2025-06-01T08:00:00Z", errUsage, *start)
	}
	cs, err := labdata.ParseCurrentSign(*sign)
	if err != nil {
		return fmt.Errorf("%w: --current-sign: %v", errUsage, err)
	}
	opt := &labdata.Options{Sign: cs}
	sendTemps := true
	if _, err := optionalCelsius(fs, *celsius); err != nil {
		return err
	}
	if math.IsNaN(*celsius) {
		placeholder := 25.0 // never sent: a log without temperatures sends none
		opt.DefaultCelsius = &placeholder
	} else {
		opt.DefaultCelsius = celsius
	}
	rec, err := labdata.ReadFile(*in, opt)
	if err != nil {
		return err
	}
	if rec.TemperatureDefaulted && math.IsNaN(*celsius) {
		sendTemps = false
	}
	if ps := rec.Profiles(); len(ps) > 1 {
		return fmt.Errorf("%s holds %d profiles, each with its own time axis; send them one at a time", *in, len(ps))
	}

	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	c := pb.NewTelemetryServiceClient(conn)
	out := ingestJSON{Battery: name, Samples: rec.Len(), Rejections: []ingestRejectionJSON{}}
	var last *pb.BatteryState
	for lo := 0; lo < rec.Len(); lo += *chunk {
		hi := min(lo+*chunk, rec.Len())
		t0 := rec.Time[lo]
		b := &pb.SampleBlock{
			Battery:            name,
			BaseTime:           timestamppb.New(base.Add(time.Duration(math.Round(t0 * 1e9)))),
			TimeOffsetsSeconds: make([]float64, hi-lo),
			CurrentAmps:        rec.Current[lo:hi],
			VoltageVolts:       rec.Voltage[lo:hi],
		}
		for k := range b.TimeOffsetsSeconds {
			b.TimeOffsetsSeconds[k] = rec.Time[lo+k] - t0
		}
		if sendTemps {
			b.TemperatureCelsius = rec.Celsius[lo:hi]
		}
		resp, err := call(ctx, cf, c.IngestTelemetry, &pb.IngestTelemetryRequest{Blocks: []*pb.SampleBlock{b}})
		if err != nil {
			return fmt.Errorf("after %d of %d samples: %w", lo, rec.Len(), err)
		}
		out.Calls++
		if len(resp.GetResults()) != 1 {
			return fmt.Errorf("the server answered %d results for one block", len(resp.GetResults()))
		}
		res := resp.GetResults()[0]
		if e := res.GetError(); e != nil {
			msg := fmt.Sprintf("%s: %s", e.GetCode(), e.GetMessage())
			if e.GetField() != "" && e.GetCode() == "INVALID_ARGUMENT" {
				msg += " (" + e.GetField() + ")"
			}
			return fmt.Errorf("after %d of %d samples: %s", lo, rec.Len(), msg)
		}
		out.Applied += int(res.GetAppliedCount())
		out.Duplicate += int(res.GetDuplicateCount())
		out.Rejected += int(res.GetRejectedCount())
		for _, r := range res.GetRejections() {
			if len(out.Rejections) < maxRejectionsShown {
				out.Rejections = append(out.Rejections, ingestRejectionJSON{
					Row: lo + int(r.GetIndex()) + 1, SequenceNumber: r.GetSequenceNumber(),
					Reason: enumText(r.GetReason().String(), "SAMPLE_REJECTION_REASON_"), Message: r.GetMessage(),
				})
			}
		}
		last = res.GetState()
		if rec.Len() > *chunk {
			fmt.Fprintf(stderr, "ingest: %d/%d samples sent (%.0f %%)\n", hi, rec.Len(), 100*float64(hi)/float64(rec.Len()))
		}
	}
	out.AppliedSequenceNumber, out.DurableSequenceNumber = last.GetAppliedSequenceNumber(), last.GetDurableSequenceNumber()
	if *asJSON {
		if last != nil {
			if out.State, err = protojson.Marshal(last); err != nil {
				return err
			}
		}
		enc := json.NewEncoder(stdout)
		enc.SetIndent("", "  ")
		return enc.Encode(out)
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "battery\t%s\n", name)
	fmt.Fprintf(tw, "samples\t%d in %d call(s)\n", out.Samples, out.Calls)
	fmt.Fprintf(tw, "applied\t%d\n", out.Applied)
	fmt.Fprintf(tw, "duplicate\t%d (already applied before)\n", out.Duplicate)
	fmt.Fprintf(tw, "rejected\t%d\n", out.Rejected)
	fmt.Fprintf(tw, "applied watermark\t%s\n", watermark(out.AppliedSequenceNumber))
	fmt.Fprintf(tw, "durable watermark\t%s\n", watermark(out.DurableSequenceNumber))
	if last.GetInitialized() {
		fmt.Fprintf(tw, "state of charge\t%s ± %s (1σ)\n", pct(last.GetStateOfCharge()), pct(last.GetStateOfChargeStddev()))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, r := range out.Rejections {
		fmt.Fprintf(stdout, "rejected row %d (sequence %d): %s: %s\n", r.Row, r.SequenceNumber, r.Reason, r.Message)
	}
	if out.Rejected > len(out.Rejections) {
		fmt.Fprintf(stdout, "… and %d more rejected\n", out.Rejected-len(out.Rejections))
	}
	return nil
}

// watermark formats a sequence number, with the instant it stands for when it looks
// like a time in microseconds since the Unix epoch (the default numbering).
func watermark(seq int64) string {
	if seq <= 0 {
		return "none"
	}
	if seq > 1e15 { // after 2001-09-09 in microseconds
		return fmt.Sprintf("%d (%s)", seq, time.UnixMicro(seq).UTC().Format(time.RFC3339Nano))
	}
	return fmt.Sprint(seq)
}
