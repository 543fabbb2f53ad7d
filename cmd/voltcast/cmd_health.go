package main

import (
	"context"
	"fmt"
	"io"
	"math"
	"text/tabwriter"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

func init() {
	register("health", command{
		summary: "state of health of a stored battery on a running server: fade trend and end of life (--server)",
		run:     runHealth,
	})
}

func runHealth(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("health", stderr)
	cf := addClientFlags(fs)
	battery := remoteBattery(fs)
	eol := fs.Float64("end-of-life-fraction", 0.8, "end of life as a fraction of rated capacity, in (0, 1) (80 %: common practice)")
	asJSON := fs.Bool("json", false, "print JSON (the API's AssessHealthResponse) instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast health --battery NAME --server ADDR [--end-of-life-fraction F] [--json]")
		fmt.Fprintln(stderr, "Asks a running server for a stored battery's capacity and resistance relative to new, the fitted")
		fmt.Fprintln(stderr, "capacity-fade trend and when it projects the end of life. For a capacity history in a CSV file,")
		fmt.Fprintln(stderr, "use voltcast lifetime offline.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *battery == "" {
		return fmt.Errorf("%w: --battery is required", errUsage)
	}
	name, err := resourceName("batteries", *battery)
	if err != nil {
		return err
	}
	if math.IsNaN(*eol) || *eol <= 0 || *eol >= 1 {
		return fmt.Errorf("%w: --end-of-life-fraction must be in (0, 1), got %g", errUsage, *eol)
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	res, err := call(ctx, cf, pb.NewForecastServiceClient(conn).AssessHealth, &pb.AssessHealthRequest{Battery: name, EndOfLifeCapacityFraction: *eol})
	if err != nil {
		return err
	}
	if *asJSON {
		return writeProtoJSON(stdout, res)
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "battery\t%s\n", name)
	fmt.Fprintf(tw, "capacity\t%s of rated\n", pct(res.GetCapacityFraction()))
	if r := res.GetResistanceFraction(); r > 0 {
		fmt.Fprintf(tw, "resistance\t%s of new\n", pct(r))
	}
	fmt.Fprintf(tw, "equivalent cycles\t%.1f\n", res.GetEquivalentFullCycles())
	fmt.Fprintf(tw, "fade\t%.3g %% of rated capacity per 100 cycles\n", 100*res.GetFadePerHundredCycles())
	end := fmt.Sprintf("%s of rated capacity", pct(*eol))
	switch {
	case res.GetEndOfLifeCycles() <= 0:
		fmt.Fprintf(tw, "end of life (%s)\tno fade detected yet\n", end)
	default:
		upper := "unbounded"
		if u := res.GetEndOfLifeCyclesUpper(); u > 0 {
			upper = fmt.Sprintf("%.0f", u)
		}
		fmt.Fprintf(tw, "end of life (%s)\tat about %.0f cycles (%.0f … %s)\n", end, res.GetEndOfLifeCycles(), res.GetEndOfLifeCyclesLower(), upper)
		if res.GetEndOfLifeTime() != nil {
			fmt.Fprintf(tw, "projected date\t%s\n", stamp(res.GetEndOfLifeTime()))
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, n := range res.GetNotes() {
		fmt.Fprintln(stdout, "note:", n)
	}
	return nil
}
