package service

import (
	"context"
	"errors"
	"strconv"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

type batteryServer struct {
	pb.UnimplementedBatteryServiceServer
	s *Service
}

// maxCells is the most cells in series, and the most in parallel (the model's limit).
const maxCells = 1000

func checkLabels(v *violations, field string, labels map[string]string) {
	if err := store.ValidLabels(labels); err != nil {
		v.add(field, "%v", err)
	}
}

func etag(version int64) string { return strconv.FormatInt(version, 10) }

// parseEtag returns the version an etag names, or AnyVersion for "".
func parseEtag(field, tag string) (int64, error) {
	if tag == "" {
		return store.AnyVersion, nil
	}
	v, err := strconv.ParseInt(tag, 10, 64)
	if err != nil || v <= 0 {
		return 0, invalid(field, "not an etag this service issued")
	}
	return v, nil
}

func (h *batteryServer) CreateBattery(ctx context.Context, req *pb.CreateBatteryRequest) (*pb.CreateBatteryResponse, error) {
	b, err := h.create(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.CreateBatteryResponse{Battery: b}, nil
}

func (h *batteryServer) create(ctx context.Context, req *pb.CreateBatteryRequest) (*pb.Battery, error) {
	var v violations
	id := req.GetBatteryId()
	checkID(&v, "battery_id", id)
	if n := len(req.GetRequestId()); n > maxRequestID {
		v.add("request_id", "at most %d bytes, got %d", maxRequestID, n)
	}
	in := req.GetBattery()
	if in == nil {
		v.add("battery", "is required")
		return nil, v.err()
	}
	if n := len(in.GetDisplayName()); n > maxDisplayName {
		v.add("battery.display_name", "at most %d bytes, got %d", maxDisplayName, n)
	}
	if n := in.GetSeriesCount(); n < 1 || n > maxCells {
		v.add("battery.series_count", "must be 1 to %d, got %d", maxCells, n)
	}
	if n := in.GetParallelCount(); n < 1 || n > maxCells {
		v.add("battery.parallel_count", "must be 1 to %d, got %d", maxCells, n)
	}
	checkLabels(&v, "battery.labels", in.GetLabels())
	if in.InitialStateOfCharge != nil {
		if err := cell.CheckSOC("battery.initial_state_of_charge", in.GetInitialStateOfCharge()); err != nil {
			v.add("battery.initial_state_of_charge", "%s", err.(*cell.FieldError).Reason)
		}
	}
	typeID, err := parseName("battery.battery_type", in.GetBatteryType(), collBatteryTypes)
	if err != nil {
		var se *Error
		if errors.As(err, &se) {
			v = append(v, se.Violations...)
		}
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	t, err := h.s.lookupType(ctx, "battery.battery_type", in.GetBatteryType())
	if err != nil {
		return nil, err
	}
	pack, err := cell.NewPack(t, int(in.GetSeriesCount()), int(in.GetParallelCount()))
	if err != nil {
		return nil, modelFieldErr("battery", err)
	}
	start := time.Now()
	sb, err := h.s.store.CreateBattery(ctx, tenant(ctx), store.Battery{
		ID:          id,
		TypeName:    typeID,
		Series:      int(in.GetSeriesCount()),
		Parallel:    int(in.GetParallelCount()),
		DisplayName: in.GetDisplayName(),
		Labels:      in.GetLabels(),
	}, req.GetRequestId())
	h.s.metrics.observeStore(ctx, "CreateBattery", start)
	if err != nil {
		return nil, resourceErr(err, batteryName(id))
	}
	if in.InitialStateOfCharge != nil {
		if err := h.s.initState(ctx, id, pack, in.GetInitialStateOfCharge()); err != nil {
			return nil, err
		}
	}
	return h.s.batteryToPB(ctx, sb)
}

// batteryToPB converts a stored battery, reading its state.
func (s *Service) batteryToPB(ctx context.Context, b store.Battery) (*pb.Battery, error) {
	out := &pb.Battery{
		Name:          batteryName(b.ID),
		DisplayName:   b.DisplayName,
		BatteryType:   batteryTypeName(b.TypeName),
		SeriesCount:   int32(b.Series),
		ParallelCount: int32(b.Parallel),
		Labels:        b.Labels,
		CreateTime:    timestamppb.New(b.CreateTime),
		UpdateTime:    timestamppb.New(b.UpdateTime),
		Etag:          etag(b.Version),
	}
	st, err := s.batteryState(ctx, b.ID)
	if err != nil {
		return nil, err
	}
	out.State = st
	return out, nil
}

func (h *batteryServer) GetBattery(ctx context.Context, req *pb.GetBatteryRequest) (*pb.GetBatteryResponse, error) {
	b, err := h.get(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.GetBatteryResponse{Battery: b}, nil
}

func (h *batteryServer) get(ctx context.Context, req *pb.GetBatteryRequest) (*pb.Battery, error) {
	id, err := parseName("name", req.GetName(), collBatteries)
	if err != nil {
		return nil, err
	}
	b, err := h.s.getBattery(ctx, id)
	if err != nil {
		return nil, err
	}
	return h.s.batteryToPB(ctx, b)
}

func (s *Service) getBattery(ctx context.Context, id string) (store.Battery, error) {
	defer s.metrics.observeStore(ctx, "GetBattery", time.Now())
	b, err := s.store.GetBattery(ctx, tenant(ctx), id)
	return b, resourceErr(err, batteryName(id))
}

func (h *batteryServer) ListBatteries(ctx context.Context, req *pb.ListBatteriesRequest) (*pb.ListBatteriesResponse, error) {
	resp, err := h.list(ctx, req)
	return resp, h.s.status(ctx, err)
}

func (h *batteryServer) list(ctx context.Context, req *pb.ListBatteriesRequest) (*pb.ListBatteriesResponse, error) {
	size, err := pageSize(req.GetPageSize())
	if err != nil {
		return nil, err
	}
	start := time.Now()
	bs, next, err := h.s.store.ListBatteries(ctx, tenant(ctx), store.BatteryFilter{}, store.PageRequest{Size: size, Token: req.GetPageToken()})
	h.s.metrics.observeStore(ctx, "ListBatteries", start)
	if err != nil {
		return nil, err
	}
	resp := &pb.ListBatteriesResponse{NextPageToken: next}
	for _, b := range bs {
		pbb, err := h.s.batteryToPB(ctx, b)
		if err != nil {
			return nil, err
		}
		resp.Batteries = append(resp.Batteries, pbb)
	}
	return resp, nil
}

func (h *batteryServer) UpdateBattery(ctx context.Context, req *pb.UpdateBatteryRequest) (*pb.UpdateBatteryResponse, error) {
	b, err := h.update(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.UpdateBatteryResponse{Battery: b}, nil
}

func (h *batteryServer) update(ctx context.Context, req *pb.UpdateBatteryRequest) (*pb.Battery, error) {
	in := req.GetBattery()
	if in == nil {
		return nil, invalid("battery", "is required")
	}
	id, err := parseName("battery.name", in.GetName(), collBatteries)
	if err != nil {
		return nil, err
	}
	var v violations
	var setName, setLabels bool
	if len(req.GetUpdateMask().GetPaths()) == 0 {
		v.add("update_mask", "is required: name the fields to change (display_name, labels, or *)")
	}
	for _, p := range req.GetUpdateMask().GetPaths() {
		switch p {
		case "display_name", "displayName": // proto name, or the JSON name a REST client writes (AIP-161)
			setName = true
		case "labels":
			setLabels = true
		case "*":
			setName, setLabels = true, true
		default:
			v.add("update_mask", "field %q cannot be updated (only display_name and labels)", truncate(p, 100))
		}
	}
	if setName && len(in.GetDisplayName()) > maxDisplayName {
		v.add("battery.display_name", "at most %d bytes, got %d", maxDisplayName, len(in.GetDisplayName()))
	}
	if setLabels {
		checkLabels(&v, "battery.labels", in.GetLabels())
	}
	expected, err := parseEtag("battery.etag", in.GetEtag())
	if err != nil {
		return nil, err
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	cur, err := h.s.getBattery(ctx, id)
	if err != nil {
		return nil, err
	}
	if expected == store.AnyVersion {
		// Read-modify-write without an etag still must not lose a concurrent update
		// of the other field: compare-and-swap against what was read.
		expected = cur.Version
	}
	if setName {
		cur.DisplayName = in.GetDisplayName()
	}
	if setLabels {
		cur.Labels = in.GetLabels()
	}
	start := time.Now()
	updated, err := h.s.store.UpdateBattery(ctx, tenant(ctx), cur, expected)
	h.s.metrics.observeStore(ctx, "UpdateBattery", start)
	if err != nil {
		return nil, resourceErr(err, batteryName(id))
	}
	return h.s.batteryToPB(ctx, updated)
}

func (h *batteryServer) DeleteBattery(ctx context.Context, req *pb.DeleteBatteryRequest) (*pb.DeleteBatteryResponse, error) {
	if err := h.delete(ctx, req); err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.DeleteBatteryResponse{}, nil
}

func (h *batteryServer) delete(ctx context.Context, req *pb.DeleteBatteryRequest) error {
	id, err := parseName("name", req.GetName(), collBatteries)
	if err != nil {
		return err
	}
	expected, err := parseEtag("etag", req.GetEtag())
	if err != nil {
		return err
	}
	h.s.forget(id)
	start := time.Now()
	err = h.s.store.DeleteBattery(ctx, tenant(ctx), id, expected)
	h.s.metrics.observeStore(ctx, "DeleteBattery", start)
	return resourceErr(err, batteryName(id))
}
