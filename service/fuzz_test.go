package service

import (
	"context"
	"log/slog"
	"math"
	"testing"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/estimate"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

// FuzzBatteryTypeValidation feeds arbitrary battery types (decoded from fuzz bytes)
// through the request validation. It must never panic, and whatever it accepts must be
// usable by the model: a pack of it steps without panicking and stays finite.
func FuzzBatteryTypeValidation(f *testing.F) {
	for _, n := range chem.Names() {
		t, _ := chem.Lookup(n)
		b, _ := proto.Marshal(typeToPB(t, ""))
		f.Add(b)
	}
	f.Add([]byte{})
	f.Fuzz(func(t *testing.T, b []byte) {
		var in pb.BatteryType
		if proto.Unmarshal(b, &in) != nil {
			return
		}
		typ, err := typeFromPB("battery_type", &in, "fuzz")
		if err != nil {
			return
		}
		pack, err := cell.NewPack(typ, 2, 2)
		if err != nil {
			t.Fatalf("accepted type does not make a pack: %v", err)
		}
		st := cell.State{SOC: 0.5}
		pack.Step(&st, 1, 1, cell.Kelvin(25))
		if v := pack.Voltage(&st, 1, cell.Kelvin(25)); math.IsNaN(v) {
			t.Fatalf("accepted type gives a NaN voltage")
		}
	})
}

// FuzzSampleBlock feeds arbitrary sample blocks to the block validation and the
// estimator loop. It must never panic, and the applied watermark must never move
// backwards.
func FuzzSampleBlock(f *testing.F) {
	seed := &pb.SampleBlock{Battery: "batteries/b", SequenceNumbers: []int64{1, 2, 3}, BaseTime: timestamppb.New(timestamppb.Now().AsTime()),
		TimeOffsetsSeconds: []float64{0, 1, 2}, CurrentAmps: []float64{0, 1, -1}, VoltageVolts: []float64{7.4, 7.3, 7.5}, TemperatureCelsius: []float64{25}}
	b, _ := proto.Marshal(seed)
	f.Add(b)
	seed.SequenceNumbers = nil
	seed.TimeOffsetsSeconds = []float64{0, math.Inf(1), -1}
	b, _ = proto.Marshal(seed)
	f.Add(b)
	typ, _ := chem.Lookup("generic-nmc-18650")
	pack, _ := cell.NewPack(typ, 2, 1)
	s, err := New(Options{Store: nopStore{}, Logger: slog.New(slog.DiscardHandler)})
	if err != nil {
		f.Fatal(err)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		var blk pb.SampleBlock
		if proto.Unmarshal(b, &blk) != nil {
			return
		}
		if checkBlockShape("block", &blk) != nil {
			return
		}
		ekf, err := estimate.NewEKF(pack, 0.5, &estimatorSettings)
		if err != nil {
			t.Fatal(err)
		}
		e := &entry{id: "b", pack: pack, ekf: ekf}
		res := &pb.BlockResult{}
		s.applySamples(context.Background(), e, &blk, res)
		if int(res.AppliedCount+res.DuplicateCount+res.RejectedCount) != blockSamples(&blk) {
			t.Fatalf("counts %d+%d+%d do not add up to %d samples", res.AppliedCount, res.DuplicateCount, res.RejectedCount, blockSamples(&blk))
		}
		if z := e.ekf.State().SOC; math.IsNaN(z) {
			t.Fatalf("state of charge became NaN")
		}
		// What the tracker would persist must load again (load restores it).
		if err := e.ekf.Restore(e.ekf.State()); err != nil {
			t.Fatalf("the state left by the block would not load again: %v", err)
		}
	})
}

// nopStore is a store that is never reached by the code under fuzzing.
type nopStore struct{ store.Store }
