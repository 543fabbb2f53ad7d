package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"text/tabwriter"
	"time"

	"google.golang.org/protobuf/types/known/fieldmaskpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

func init() {
	verbs := map[string]func(ctx context.Context, args []string, stdout, stderr io.Writer) error{
		"list": batteriesList, "get": batteriesGet, "create": batteriesCreate, "update": batteriesUpdate, "delete": batteriesDelete,
	}
	register("batteries", command{
		summary: "manage the batteries of a running server: list, get, create, update, delete (--server)",
		run:     subcommands("batteries", verbs, []string{"list", "get", "create", "update", "delete"}),
	})
}

func batteriesList(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("batteries list", stderr)
	cf := addClientFlags(fs)
	limit := fs.Int("limit", 0, "list at most this many batteries (0: all)")
	asJSON := fs.Bool("json", false, "print JSON (the API's ListBatteriesResponse) instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast batteries list --server ADDR [--limit N] [--json]")
		fmt.Fprintln(stderr, "Lists the batteries with their tracked state, ordered by name. Current is positive on discharge.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *limit < 0 {
		return fmt.Errorf("%w: --limit must not be negative, got %d", errUsage, *limit)
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	c := pb.NewBatteryServiceClient(conn)
	all := &pb.ListBatteriesResponse{}
	for {
		req := &pb.ListBatteriesRequest{PageToken: all.GetNextPageToken()}
		if *limit > 0 {
			req.PageSize = int32(min(*limit-len(all.Batteries), 1000))
		}
		resp, err := call(ctx, cf, c.ListBatteries, req)
		if err != nil {
			return err
		}
		all.Batteries = append(all.Batteries, resp.GetBatteries()...)
		all.NextPageToken = resp.GetNextPageToken()
		if all.NextPageToken == "" || (*limit > 0 && len(all.Batteries) >= *limit) {
			break
		}
	}
	if *asJSON {
		return writeProtoJSON(stdout, all)
	}
	return writeBatteryTable(stdout, all.GetBatteries())
}

// writeBatteryTable prints one line per battery.
func writeBatteryTable(w io.Writer, bs []*pb.Battery) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "NAME\tTYPE\tCELLS\tSOC\t±1σ\tCAPACITY\tRESISTANCE\tCYCLES\tVOLTS\tAMPS\t°C\tLAST SAMPLE")
	for _, b := range bs {
		s := b.GetState()
		typ := strings.TrimPrefix(b.GetBatteryType(), "batteryTypes/")
		cells := fmt.Sprintf("%ds%dp", b.GetSeriesCount(), b.GetParallelCount())
		if !s.GetInitialized() {
			fmt.Fprintf(tw, "%s\t%s\t%s\t-\t-\t-\t-\t-\t-\t-\t-\tno telemetry yet\n", b.GetName(), typ, cells)
			continue
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%.2f\t%.2f\t%.2f\t%.1f\t%s\n", b.GetName(), typ, cells,
			pct(s.GetStateOfCharge()), pct(s.GetStateOfChargeStddev()), pct(s.GetCapacityFraction()), pct(s.GetResistanceFraction()),
			s.GetEquivalentFullCycles(), s.GetVoltageVolts(), s.GetCurrentAmps(), s.GetTemperatureCelsius(), stamp(s.GetLastSampleTime()))
	}
	return tw.Flush()
}

// stamp formats a timestamp in UTC, or "-" when unset.
func stamp(ts *timestamppb.Timestamp) string {
	if ts == nil {
		return "-"
	}
	return ts.AsTime().UTC().Format(time.RFC3339)
}

// writeBattery prints one battery with its state.
func writeBattery(w io.Writer, b *pb.Battery) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "name\t%s\n", b.GetName())
	if b.GetDisplayName() != "" {
		fmt.Fprintf(tw, "display name\t%s\n", b.GetDisplayName())
	}
	fmt.Fprintf(tw, "type\t%s\n", b.GetBatteryType())
	fmt.Fprintf(tw, "cells\t%d in series × %d in parallel\n", b.GetSeriesCount(), b.GetParallelCount())
	if len(b.GetLabels()) > 0 {
		var ls []string
		for k, v := range b.GetLabels() {
			ls = append(ls, k+"="+v)
		}
		slices.Sort(ls)
		fmt.Fprintf(tw, "labels\t%s\n", strings.Join(ls, ", "))
	}
	fmt.Fprintf(tw, "created\t%s\n", stamp(b.GetCreateTime()))
	fmt.Fprintf(tw, "updated\t%s\n", stamp(b.GetUpdateTime()))
	fmt.Fprintf(tw, "etag\t%s\n", b.GetEtag())
	s := b.GetState()
	if !s.GetInitialized() {
		fmt.Fprintf(tw, "state\tno telemetry yet\n")
		return tw.Flush()
	}
	fmt.Fprintf(tw, "state of charge\t%s ± %s (1σ)\n", pct(s.GetStateOfCharge()), pct(s.GetStateOfChargeStddev()))
	fmt.Fprintf(tw, "capacity\t%s of rated\n", pct(s.GetCapacityFraction()))
	fmt.Fprintf(tw, "resistance\t%s of new\n", pct(s.GetResistanceFraction()))
	fmt.Fprintf(tw, "equivalent cycles\t%.2f\n", s.GetEquivalentFullCycles())
	dir := "discharging"
	switch {
	case s.GetCurrentAmps() < 0:
		dir = "charging"
	case s.GetCurrentAmps() == 0:
		dir = "at rest"
	}
	fmt.Fprintf(tw, "last sample\t%s: %.3f V, %.3f A (%s), %.1f °C\n", stamp(s.GetLastSampleTime()),
		s.GetVoltageVolts(), s.GetCurrentAmps(), dir, s.GetTemperatureCelsius())
	fmt.Fprintf(tw, "watermarks\tapplied %d, durable %d\n", s.GetAppliedSequenceNumber(), s.GetDurableSequenceNumber())
	return tw.Flush()
}

// printBattery prints a battery as JSON or as text.
func printBattery(w io.Writer, b *pb.Battery, asJSON bool) error {
	if asJSON {
		return writeProtoJSON(w, b)
	}
	return writeBattery(w, b)
}

func batteriesGet(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("batteries get", stderr)
	cf := addClientFlags(fs)
	asJSON := fs.Bool("json", false, "print JSON (the API's Battery) instead of text")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast batteries get NAME --server ADDR [--json]")
		fmt.Fprintln(stderr, "Shows a battery and its tracked state. NAME is \"batteries/ID\" or just ID.")
		fs.PrintDefaults()
	}
	name, conn, err := cf.nameAndDial(fs, args, "batteries")
	if err != nil {
		return err
	}
	defer conn.Close()
	resp, err := call(ctx, cf, pb.NewBatteryServiceClient(conn).GetBattery, &pb.GetBatteryRequest{Name: name})
	if err != nil {
		return err
	}
	return printBattery(stdout, resp.GetBattery(), *asJSON)
}

// parseLabels turns repeated key=value flags into a map.
func parseLabels(kvs []string) (map[string]string, error) {
	out := map[string]string{}
	for _, kv := range kvs {
		k, v, ok := strings.Cut(kv, "=")
		if !ok || k == "" {
			return nil, fmt.Errorf("%w: --label %q: want KEY=VALUE", errUsage, kv)
		}
		if _, dup := out[k]; dup {
			return nil, fmt.Errorf("%w: --label %q: key given twice", errUsage, k)
		}
		out[k] = v
	}
	return out, nil
}

func batteriesCreate(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("batteries create", stderr)
	cf := addClientFlags(fs)
	typeName := fs.String("type", "", "battery type: a built-in (see voltcast battery-types list) or registered type (required)")
	series := fs.Int("series", 0, "cells in series, 1 to 1000 (required)")
	parallel := fs.Int("parallel", 1, "cells in parallel, 1 to 1000")
	display := fs.String("display-name", "", "human-readable name")
	var labels multiFlag
	fs.Var(&labels, "label", "label KEY=VALUE (repeatable)")
	initial := fs.Float64("initial-soc", math.NaN(), "state of charge to start estimating from, a fraction 0–1 (default: from the first sample's voltage, taken as rested)")
	requestID := fs.String("request-id", "", "idempotency key: a retry with the same key returns the battery the first call created")
	asJSON := fs.Bool("json", false, "print JSON (the API's Battery) instead of text")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast batteries create ID --type TYPE --series S [--parallel P] [--display-name N] [--label K=V ...] [--initial-soc X] --server ADDR")
		fmt.Fprintln(stderr, "Registers a battery. ID: 1 to 63 lowercase letters, digits and hyphens, starting with a letter.")
		fs.PrintDefaults()
	}
	id, err := parseWithName(fs, args, "ID")
	if err != nil {
		return err
	}
	id = strings.TrimPrefix(id, "batteries/")
	if *typeName == "" {
		return fmt.Errorf("%w: --type is required", errUsage)
	}
	typ, err := resourceName("batteryTypes", *typeName)
	if err != nil {
		return err
	}
	ls, err := parseLabels(labels)
	if err != nil {
		return err
	}
	// The server checks the counts; refuse here only what the int32 conversion would
	// wrap (4294967297 would become 1).
	for _, f := range []struct {
		name string
		v    int
	}{{"series", *series}, {"parallel", *parallel}} {
		if int(int32(f.v)) != f.v {
			return fmt.Errorf("%w: --%s must be 1 to 1000 cells, got %d", errUsage, f.name, f.v)
		}
	}
	if err := checkGivenNaN(fs, []string{"initial-soc"}, *initial); err != nil {
		return err
	}
	if v := *initial; !math.IsNaN(v) && (v < 0 || v > 1) {
		return fmt.Errorf("%w: --initial-soc must be a fraction 0–1, got %g", errUsage, v)
	}
	b := &pb.Battery{BatteryType: typ, SeriesCount: int32(*series), ParallelCount: int32(*parallel), DisplayName: *display, Labels: ls}
	if !math.IsNaN(*initial) {
		b.InitialStateOfCharge = initial
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	resp, err := call(ctx, cf, pb.NewBatteryServiceClient(conn).CreateBattery, &pb.CreateBatteryRequest{BatteryId: id, Battery: b, RequestId: *requestID})
	if err != nil {
		return err
	}
	return printBattery(stdout, resp.GetBattery(), *asJSON)
}

func batteriesUpdate(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("batteries update", stderr)
	cf := addClientFlags(fs)
	display := fs.String("display-name", "", "new human-readable name")
	var labels multiFlag
	fs.Var(&labels, "label", "label KEY=VALUE (repeatable); the given labels replace all the battery's labels")
	clearLabels := fs.Bool("clear-labels", false, "remove every label")
	etag := fs.String("etag", "", "fail if the battery changed since it had this etag")
	asJSON := fs.Bool("json", false, "print JSON (the API's Battery) instead of text")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast batteries update NAME [--display-name N] [--label K=V ... | --clear-labels] [--etag E] --server ADDR")
		fmt.Fprintln(stderr, "Changes a battery's display name and labels; its type and cell counts cannot change.")
		fs.PrintDefaults()
	}
	arg, err := parseWithName(fs, args, "NAME")
	if err != nil {
		return err
	}
	name, err := resourceName("batteries", arg)
	if err != nil {
		return err
	}
	given := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { given[f.Name] = true })
	b := &pb.Battery{Name: name, DisplayName: *display, Etag: *etag}
	mask := &fieldmaskpb.FieldMask{}
	if given["display-name"] {
		mask.Paths = append(mask.Paths, "display_name")
	}
	switch {
	case len(labels) > 0 && *clearLabels:
		return fmt.Errorf("%w: give --label or --clear-labels, not both", errUsage)
	case len(labels) > 0:
		if b.Labels, err = parseLabels(labels); err != nil {
			return err
		}
		mask.Paths = append(mask.Paths, "labels")
	case *clearLabels:
		mask.Paths = append(mask.Paths, "labels")
	}
	if len(mask.Paths) == 0 {
		return fmt.Errorf("%w: nothing to change: give --display-name, --label or --clear-labels", errUsage)
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	resp, err := call(ctx, cf, pb.NewBatteryServiceClient(conn).UpdateBattery, &pb.UpdateBatteryRequest{Battery: b, UpdateMask: mask})
	if err != nil {
		return err
	}
	return printBattery(stdout, resp.GetBattery(), *asJSON)
}

func batteriesDelete(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("batteries delete", stderr)
	cf := addClientFlags(fs)
	etag := fs.String("etag", "", "fail if the battery changed since it had this etag")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast batteries delete NAME [--etag E] --server ADDR")
		fmt.Fprintln(stderr, "Deletes a battery with its tracked state and health history.")
		fs.PrintDefaults()
	}
	name, conn, err := cf.nameAndDial(fs, args, "batteries")
	if err != nil {
		return err
	}
	defer conn.Close()
	if _, err := call(ctx, cf, pb.NewBatteryServiceClient(conn).DeleteBattery, &pb.DeleteBatteryRequest{Name: name, Etag: *etag}); err != nil {
		return err
	}
	_, err = fmt.Fprintf(stdout, "deleted %s\n", name)
	return err
}
