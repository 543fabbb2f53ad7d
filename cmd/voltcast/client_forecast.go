package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"math"
	"strings"
	"text/tabwriter"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/sim"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// forecast and charge run offline unless --battery names a stored battery; then they
// ask a running server (--server or VOLTCAST_SERVER) about it, from its tracked state.

// onServer reports whether args ask a subcommand to work on a stored battery on a
// server: a --battery (or --server) flag among them. Flags after a "--" do not count.
func onServer(args []string) bool {
	for _, a := range args {
		if a == "--" {
			return false
		}
		name, _, _ := strings.Cut(strings.TrimLeft(a, "-"), "=")
		if strings.HasPrefix(a, "-") && (name == "battery" || name == "server") {
			return true
		}
	}
	return false
}

// remoteBattery reads --battery for a client subcommand.
func remoteBattery(fs *flag.FlagSet) *string {
	return fs.String("battery", "", "the stored battery, \"batteries/ID\" or ID (required)")
}

// optionalCelsius returns the value of --temperature-celsius when it was given.
func optionalCelsius(fs *flag.FlagSet, v float64) (*float64, error) {
	given := false
	fs.Visit(func(f *flag.Flag) { given = given || f.Name == "temperature-celsius" })
	if !given {
		return nil, nil
	}
	if math.IsNaN(v) || v < -60 || v > 100 {
		return nil, fmt.Errorf("%w: --temperature-celsius must be -60 to 100, got %g", errUsage, v)
	}
	return &v, nil
}

// seconds converts a duration to seconds for printing.
func seconds(d *durationpb.Duration) float64 { return d.AsDuration().Seconds() }

func runForecastRemote(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("forecast", stderr)
	cf := addClientFlags(fs)
	battery := remoteBattery(fs)
	current := fs.Float64("current-amps", math.NaN(), "constant pack current, A (positive = discharge)")
	power := fs.Float64("power-watts", math.NaN(), "constant pack power, W (positive = discharge)")
	resistance := fs.Float64("resistance-ohms", math.NaN(), "constant load resistance across the pack, Ω")
	profile := fs.String("profile", "", "duty cycle CSV with header duration_s,kind,value (kind: current, power, resistance or rest), repeated until the cut-off")
	celsius := fs.Float64("temperature-celsius", math.NaN(), "pack temperature, °C (default: the battery's last temperature)")
	horizonH := fs.Float64("horizon-hours", 0, "give up after this many hours, at most 720 (0: the server's 30 days)")
	asJSON := fs.Bool("json", false, "print JSON (the API's ForecastRuntimeResponse) instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast forecast --battery NAME --server ADDR (--current-amps A | --power-watts W | --resistance-ohms R | --profile FILE.csv) [--temperature-celsius T] [--json]")
		fmt.Fprintln(stderr, "Asks a running server how long a stored battery will run under the load, from its tracked state of")
		fmt.Fprintln(stderr, "charge, capacity and resistance, with a spread from their uncertainty. Current and power are positive")
		fmt.Fprintln(stderr, "on discharge. Without --battery, forecast runs offline (voltcast forecast -h).")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *battery == "" {
		return fmt.Errorf("%w: --battery is required to forecast on a server (without --server and --battery, forecast runs offline)", errUsage)
	}
	name, err := resourceName("batteries", *battery)
	if err != nil {
		return err
	}
	load, desc, err := remoteLoad(fs, *current, *power, *resistance, *profile)
	if err != nil {
		return err
	}
	req := &pb.ForecastRuntimeRequest{Battery: name, Load: load}
	if req.TemperatureCelsius, err = optionalCelsius(fs, *celsius); err != nil {
		return err
	}
	switch h := *horizonH; {
	case math.IsNaN(h) || h < 0 || h > 720:
		return fmt.Errorf("%w: --horizon-hours must be 0 to 720, got %g", errUsage, h)
	case h > 0:
		req.MaxDuration = durationpb.New(time.Duration(h * float64(time.Hour)))
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	res, err := call(ctx, cf, pb.NewForecastServiceClient(conn).ForecastRuntime, req)
	if err != nil {
		return err
	}
	if *asJSON {
		return writeProtoJSON(stdout, res)
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "battery\t%s, from its tracked state\n", name)
	fmt.Fprintf(tw, "load\t%s\n", desc)
	fmt.Fprintf(tw, "result\t%s\n", enumText(res.GetEndReason().String(), "RUNTIME_END_REASON_"))
	fmt.Fprintf(tw, "runtime\t%s\n", humanSeconds(seconds(res.GetRuntime())))
	fmt.Fprintf(tw, "range (±1σ)\t%s … %s\n", humanSeconds(seconds(res.GetRuntimeLower())), humanSeconds(seconds(res.GetRuntimeUpper())))
	fmt.Fprintf(tw, "charge delivered\t%.4g Ah\n", res.GetChargeAmpHours())
	fmt.Fprintf(tw, "energy delivered\t%.4g Wh\n", res.GetEnergyWattHours())
	fmt.Fprintf(tw, "at the end\t%.4g V, %s state of charge\n", res.GetEndVoltageVolts(), pct(math.Max(0, res.GetEndStateOfCharge())))
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, m := range res.GetWarnings() {
		fmt.Fprintln(stdout, "warning:", m)
	}
	_, err = fmt.Fprintln(stdout, dischargeCaution)
	return err
}

// remoteLoad builds the API load from exactly one of the load flags.
func remoteLoad(fs *flag.FlagSet, current, power, resistance float64, profile string) (*pb.Load, string, error) {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	var given []string
	for _, n := range []string{"current-amps", "power-watts", "resistance-ohms", "profile"} {
		if set[n] {
			given = append(given, "--"+n)
		}
	}
	if len(given) != 1 {
		return nil, "", fmt.Errorf("%w: give exactly one load: --current-amps, --power-watts, --resistance-ohms or --profile", errUsage)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"current-amps", current}, {"power-watts", power}, {"resistance-ohms", resistance}} {
		if set[f.name] && (math.IsNaN(f.v) || math.IsInf(f.v, 0)) {
			return nil, "", fmt.Errorf("%w: --%s must be a finite number, got %g", errUsage, f.name, f.v)
		}
	}
	switch {
	case set["current-amps"]:
		return &pb.Load{Kind: &pb.Load_CurrentAmps{CurrentAmps: current}}, fmt.Sprintf("constant current %g A", current), nil
	case set["power-watts"]:
		return &pb.Load{Kind: &pb.Load_PowerWatts{PowerWatts: power}}, fmt.Sprintf("constant power %g W", power), nil
	case set["resistance-ohms"]:
		return &pb.Load{Kind: &pb.Load_ResistanceOhms{ResistanceOhms: resistance}}, fmt.Sprintf("constant resistance %g Ω", resistance), nil
	}
	segs, err := readProfile(profile)
	if err != nil {
		return nil, "", err
	}
	dc := &pb.DutyCycle{}
	total := 0.0
	for _, sg := range segs {
		if math.IsInf(sg.Duration, 0) || math.IsNaN(sg.Duration) {
			return nil, "", fmt.Errorf("%w: profile %s: every step needs a finite duration", errUsage, profile)
		}
		if math.IsInf(sg.Value, 0) || math.IsNaN(sg.Value) {
			return nil, "", fmt.Errorf("%w: profile %s: every step needs a finite value", errUsage, profile)
		}
		st := &pb.DutyCycleStep{Duration: durationpb.New(time.Duration(sg.Duration * float64(time.Second)))}
		switch sg.Kind {
		case sim.Current:
			st.Kind = &pb.DutyCycleStep_CurrentAmps{CurrentAmps: sg.Value}
		case sim.Power:
			st.Kind = &pb.DutyCycleStep_PowerWatts{PowerWatts: sg.Value}
		case sim.Resistance:
			st.Kind = &pb.DutyCycleStep_ResistanceOhms{ResistanceOhms: sg.Value}
		}
		dc.Steps = append(dc.Steps, st)
		total += sg.Duration
	}
	return &pb.Load{Kind: &pb.Load_DutyCycle{DutyCycle: dc}},
		fmt.Sprintf("duty cycle %s: %d steps, %g s per pass, repeated", profile, len(segs), total), nil
}

func runChargeRemote(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("charge", stderr)
	cf := addClientFlags(fs)
	battery := remoteBattery(fs)
	target := fs.Float64("target-soc", 1, "state of charge to reach, a fraction in (0, 1]")
	celsius := fs.Float64("temperature-celsius", math.NaN(), "pack temperature during the charge, °C (default: the battery's last temperature)")
	current := fs.Float64("charger-current-amps", 0, "charger current limit, A, a positive magnitude (0: none)")
	power := fs.Float64("charger-power-watts", 0, "charger output power limit, W (0: none)")
	eff := fs.Float64("charger-efficiency", 0.9, "charger efficiency from supply to pack, in (0, 1]")
	startAt := fs.String("start-time", "", "when charging starts, RFC 3339 (default: now)")
	deadline := fs.Duration("deadline", 0, "reach the target within this time of the start, with the lowest current that makes it (e.g. 6h; 0: none)")
	asJSON := fs.Bool("json", false, "print JSON (the API's PlanChargeResponse) instead of tables")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast charge --battery NAME --server ADDR [--target-soc X] [--charger-current-amps A] [--deadline D] [--json]")
		fmt.Fprintln(stderr, "Asks a running server for a charge plan for a stored battery, from its tracked state. Current is")
		fmt.Fprintln(stderr, "positive when it leaves the pack, so charge currents print negative in JSON. A plan is a model")
		fmt.Fprintln(stderr, "estimate: the cell maker's datasheet, local codes and licensed practice always take precedence.")
		fmt.Fprintln(stderr, "Without --battery, charge runs offline (voltcast charge -h).")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *battery == "" {
		return fmt.Errorf("%w: --battery is required to plan on a server (without --server and --battery, charge runs offline)", errUsage)
	}
	name, err := resourceName("batteries", *battery)
	if err != nil {
		return err
	}
	if *deadline < 0 {
		return fmt.Errorf("%w: --deadline must not be negative, got %s", errUsage, *deadline)
	}
	if t := *target; math.IsNaN(t) || t <= 0 || t > 1 {
		return fmt.Errorf("%w: --target-soc must be a fraction in (0, 1], got %g", errUsage, t)
	}
	for _, f := range []struct {
		name string
		v    float64
	}{{"charger-current-amps", *current}, {"charger-power-watts", *power}} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) || f.v < 0 {
			return fmt.Errorf("%w: --%s must be a finite, non-negative number (0: none), got %g", errUsage, f.name, f.v)
		}
	}
	if e := *eff; math.IsNaN(e) || e <= 0 || e > 1 {
		return fmt.Errorf("%w: --charger-efficiency must be in (0, 1], got %g", errUsage, e)
	}
	start := time.Now()
	if *startAt != "" {
		if start, err = time.Parse(time.RFC3339Nano, *startAt); err != nil {
			return fmt.Errorf("%w: --start-time %q: want RFC 3339, e.g. 2025-06-01T22:00:00Z", errUsage, *startAt)
		}
	}
	req := &pb.PlanChargeRequest{
		Battery:             name,
		TargetStateOfCharge: *target,
		Charger:             &pb.Charger{MaxCurrentAmps: *current, MaxPowerWatts: *power, Efficiency: *eff},
		StartTime:           timestamppb.New(start),
	}
	if *deadline > 0 {
		req.DeadlineTime = timestamppb.New(start.Add(*deadline))
	}
	if req.TemperatureCelsius, err = optionalCelsius(fs, *celsius); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	res, err := call(ctx, cf, pb.NewForecastServiceClient(conn).PlanCharge, req)
	if err != nil {
		return err
	}
	if *asJSON {
		return writeProtoJSON(stdout, res)
	}
	fmt.Fprintf(stdout, "%s, from its tracked state: charge at up to %.3g A to %s\n\n", name, res.GetChargeCurrentAmps(), pct(*target))
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "PHASE\tDURATION\tCHARGE A (into pack)\tVOLTS\tSOC %")
	for _, ph := range res.GetPhases() {
		fmt.Fprintf(tw, "%s\t%s\t%.3g → %.3g\t%.3f → %.3f\t%.1f → %.1f\n", enumText(ph.GetKind().String(), "CHARGE_PHASE_KIND_"),
			hm(seconds(ph.GetDuration())), math.Abs(ph.GetStartCurrentAmps()), math.Abs(ph.GetEndCurrentAmps()),
			ph.GetStartVoltageVolts(), ph.GetEndVoltageVolts(), 100*ph.GetStartStateOfCharge(), 100*ph.GetEndStateOfCharge())
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(stdout)
	fmt.Fprintf(stdout, "time         %s h:mm, ends %s at %s state of charge\n", hm(seconds(res.GetDuration())), stamp(res.GetEndTime()), pct(res.GetEndStateOfCharge()))
	fmt.Fprintf(stdout, "charge       %.3g Ah into the pack, %.4g Wh from the supply\n", res.GetChargeAmpHours(), res.GetEnergyWattHours())
	if req.DeadlineTime != nil {
		met := "met"
		if !res.GetDeadlineMet() {
			met = "NOT met"
		}
		fmt.Fprintf(stdout, "deadline     %s: %s\n", stamp(req.DeadlineTime), met)
	}
	if len(res.GetWarnings()) > 0 {
		fmt.Fprintln(stdout)
		fmt.Fprintln(stdout, "warnings:")
		for _, w := range res.GetWarnings() {
			fmt.Fprintf(stdout, "  [%s] %s\n", w.GetCode(), w.GetMessage())
		}
	}
	fmt.Fprintln(stdout)
	fmt.Fprintln(stdout, "cautions:")
	for _, c := range res.GetCautions() {
		fmt.Fprintf(stdout, "  - %s\n", c)
	}
	return nil
}
