package main

import (
	"context"
	"fmt"
	"io"
	"strings"
	"text/tabwriter"

	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

func init() {
	verbs := map[string]func(ctx context.Context, args []string, stdout, stderr io.Writer) error{
		"list": batteryTypesList, "get": batteryTypesGet, "delete": batteryTypesDelete,
	}
	register("battery-types", command{
		summary: "the battery types of a running server: list, get, delete (--server)",
		run:     subcommands("battery-types", verbs, []string{"list", "get", "delete"}),
	})
}

// enumText shortens an API enum name: CHEMISTRY_LEAD_ACID_VRLA → lead-acid-vrla.
func enumText(name, prefix string) string {
	return strings.ReplaceAll(strings.ToLower(strings.TrimPrefix(name, prefix)), "_", "-")
}

func batteryTypesList(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("battery-types list", stderr)
	cf := addClientFlags(fs)
	asJSON := fs.Bool("json", false, "print JSON (the API's ListBatteryTypesResponse) instead of a table")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast battery-types list --server ADDR [--json]")
		fmt.Fprintln(stderr, "Lists the built-in catalogue, then the registered types. Values are per cell.")
		fs.PrintDefaults()
	}
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	conn, err := cf.dial()
	if err != nil {
		return err
	}
	defer conn.Close()
	c := pb.NewBatteryTypeServiceClient(conn)
	all := &pb.ListBatteryTypesResponse{}
	for {
		resp, err := call(ctx, cf, c.ListBatteryTypes, &pb.ListBatteryTypesRequest{PageSize: 1000, PageToken: all.GetNextPageToken()})
		if err != nil {
			return err
		}
		all.BatteryTypes = append(all.BatteryTypes, resp.GetBatteryTypes()...)
		if all.NextPageToken = resp.GetNextPageToken(); all.NextPageToken == "" {
			break
		}
	}
	if *asJSON {
		return writeProtoJSON(stdout, all)
	}
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "NAME\tCHEMISTRY\tNOMINAL V\tCAPACITY Ah\tCHARGE\tORIGIN")
	for _, t := range all.GetBatteryTypes() {
		origin := "registered"
		if t.GetBuiltIn() {
			origin = "built-in"
		}
		fmt.Fprintf(tw, "%s\t%s\t%.3g\t%.4g\t%s\t%s\n", t.GetName(), enumText(t.GetChemistry().String(), "CHEMISTRY_"),
			t.GetNominalVoltageVolts(), t.GetCapacityAmpHours(), chargeText(t), origin)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	_, err = fmt.Fprintln(stdout, "Values are per cell and generic; the cell maker's datasheet, local codes and licensed practice take precedence.")
	return err
}

// chargeText says in a few words how a type is charged.
func chargeText(t *pb.BatteryType) string {
	lim := t.GetLimits()
	switch t.GetChargeMethod() {
	case pb.ChargeMethod_CHARGE_METHOD_NONE:
		return "never (primary)"
	case pb.ChargeMethod_CHARGE_METHOD_CONSTANT_CURRENT_CONSTANT_VOLTAGE:
		return fmt.Sprintf("cc-cv to %.2f V", lim.GetChargeVoltageVolts())
	case pb.ChargeMethod_CHARGE_METHOD_THREE_STAGE:
		return fmt.Sprintf("three-stage to %.2f V, float %.2f V", lim.GetChargeVoltageVolts(), lim.GetFloatVoltageVolts())
	case pb.ChargeMethod_CHARGE_METHOD_NICKEL:
		return "nickel: CC, -ΔV/timer stop"
	}
	return enumText(t.GetChargeMethod().String(), "CHARGE_METHOD_")
}

func batteryTypesGet(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("battery-types get", stderr)
	cf := addClientFlags(fs)
	asJSON := fs.Bool("json", false, "print JSON (the API's BatteryType, every parameter) instead of a summary")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast battery-types get NAME --server ADDR [--json]")
		fmt.Fprintln(stderr, "Shows a battery type. NAME is \"batteryTypes/ID\" or just ID. Values are per cell.")
		fs.PrintDefaults()
	}
	name, conn, err := cf.nameAndDial(fs, args, "batteryTypes")
	if err != nil {
		return err
	}
	defer conn.Close()
	resp, err := call(ctx, cf, pb.NewBatteryTypeServiceClient(conn).GetBatteryType, &pb.GetBatteryTypeRequest{Name: name})
	if err != nil {
		return err
	}
	t := resp.GetBatteryType()
	if *asJSON {
		return writeProtoJSON(stdout, t)
	}
	lim := t.GetLimits()
	tw := tabwriter.NewWriter(stdout, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "name\t%s\n", t.GetName())
	if t.GetDisplayName() != "" {
		fmt.Fprintf(tw, "display name\t%s\n", t.GetDisplayName())
	}
	fmt.Fprintf(tw, "chemistry\t%s\n", enumText(t.GetChemistry().String(), "CHEMISTRY_"))
	fmt.Fprintf(tw, "capacity\t%.4g Ah per cell\n", t.GetCapacityAmpHours())
	fmt.Fprintf(tw, "nominal voltage\t%.4g V per cell\n", t.GetNominalVoltageVolts())
	fmt.Fprintf(tw, "equivalent circuit\tseries resistance plus %d RC branch(es)\n", len(t.GetRcBranches()))
	fmt.Fprintf(tw, "charge\t%s, up to %.3g C (usually %.3g C), %g to %g °C\n", chargeText(t),
		lim.GetMaxChargeCRate(), lim.GetStandardChargeCRate(), lim.GetChargeMinCelsius(), lim.GetChargeMaxCelsius())
	fmt.Fprintf(tw, "discharge\tto %.3g V (never below %.3g V), up to %.3g C, %g to %g °C\n",
		lim.GetCutoffVoltageVolts(), lim.GetFloorVoltageVolts(), lim.GetMaxDischargeCRate(), lim.GetDischargeMinCelsius(), lim.GetDischargeMaxCelsius())
	origin := "registered " + stamp(t.GetCreateTime())
	if t.GetBuiltIn() {
		origin = "built-in catalogue"
	}
	if t.GetCalibration() != "" {
		origin += ", fitted by " + t.GetCalibration()
	}
	fmt.Fprintf(tw, "origin\t%s\n", origin)
	for _, s := range t.GetSources() {
		fmt.Fprintf(tw, "source\t%s\n", s)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	_, err = fmt.Fprintln(stdout, "Values are per cell and generic; the cell maker's datasheet, local codes and licensed practice take precedence.")
	return err
}

func batteryTypesDelete(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("battery-types delete", stderr)
	cf := addClientFlags(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: voltcast battery-types delete NAME --server ADDR")
		fmt.Fprintln(stderr, "Deletes a registered type that no battery refers to; built-in types cannot be deleted.")
		fs.PrintDefaults()
	}
	name, conn, err := cf.nameAndDial(fs, args, "batteryTypes")
	if err != nil {
		return err
	}
	defer conn.Close()
	if _, err := call(ctx, cf, pb.NewBatteryTypeServiceClient(conn).DeleteBatteryType, &pb.DeleteBatteryTypeRequest{Name: name}); err != nil {
		return err
	}
	_, err = fmt.Fprintf(stdout, "deleted %s\n", name)
	return err
}
