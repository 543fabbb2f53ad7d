package service

import (
	"context"
	"encoding/base64"
	"encoding/json"
	"errors"
	"fmt"
	"strconv"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
	"github.com/voltcast/voltcast/service/store"
)

type batteryTypeServer struct {
	pb.UnimplementedBatteryTypeServiceServer
	s *Service
}

// Page sizes of every List call (AIP-158).
const (
	defaultPageSize = 50
	maxPageSize     = 1000
)

// pageSize validates a requested page size and applies the default and the clamp.
func pageSize(n int32) (int, error) {
	switch {
	case n < 0:
		return 0, invalid("page_size", "must not be negative, got %d", n)
	case n == 0:
		return defaultPageSize, nil
	case n > maxPageSize:
		return maxPageSize, nil
	}
	return int(n), nil
}

// The battery-type list runs over two sources: the built-in catalogue, then the store.
// Its page token says where the next page starts: "b<index>" inside the catalogue, or
// "s<store token>" inside the store; base64url-encoded so that clients treat it as
// opaque.
func typePageToken(builtin bool, pos string) string {
	p := "s"
	if builtin {
		p = "b"
	}
	return base64.RawURLEncoding.EncodeToString([]byte(p + pos))
}

func parseTypePageToken(tok string) (builtin bool, pos string, err error) {
	if tok == "" {
		return true, "0", nil
	}
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err != nil || len(b) == 0 || (b[0] != 'b' && b[0] != 's') {
		return false, "", store.ErrInvalidPageToken
	}
	return b[0] == 'b', string(b[1:]), nil
}

func (h *batteryTypeServer) ListBatteryTypes(ctx context.Context, req *pb.ListBatteryTypesRequest) (*pb.ListBatteryTypesResponse, error) {
	resp, err := h.list(ctx, req)
	return resp, h.s.status(ctx, err)
}

func (h *batteryTypeServer) list(ctx context.Context, req *pb.ListBatteryTypesRequest) (*pb.ListBatteryTypesResponse, error) {
	size, err := pageSize(req.GetPageSize())
	if err != nil {
		return nil, err
	}
	builtin, pos, err := parseTypePageToken(req.GetPageToken())
	if err != nil {
		return nil, err
	}
	resp := &pb.ListBatteryTypesResponse{}
	storeToken := pos
	if builtin {
		start, err := strconv.Atoi(pos)
		names := chem.Names()
		if err != nil || start < 0 || start > len(names) {
			return nil, store.ErrInvalidPageToken
		}
		end := min(start+size, len(names))
		for _, n := range names[start:end] {
			t, err := chem.Lookup(n)
			if err != nil {
				return nil, fmt.Errorf("catalogue lists %q but cannot build it: %w", n, err)
			}
			resp.BatteryTypes = append(resp.BatteryTypes, builtinToPB(t))
		}
		if end < len(names) {
			resp.NextPageToken = typePageToken(true, strconv.Itoa(end))
			return resp, nil
		}
		size -= end - start
		storeToken = ""
		if size == 0 {
			// The catalogue filled the page; the store's types start the next one,
			// unless there are none.
			types, _, err := h.storeList(ctx, store.PageRequest{Size: 1})
			if err != nil {
				return nil, err
			}
			if len(types) > 0 {
				resp.NextPageToken = typePageToken(false, "")
			}
			return resp, nil
		}
	}
	types, next, err := h.storeList(ctx, store.PageRequest{Size: size, Token: storeToken})
	if err != nil {
		return nil, err
	}
	for _, st := range types {
		bt, err := storedTypeToPB(st)
		if err != nil {
			return nil, err
		}
		resp.BatteryTypes = append(resp.BatteryTypes, bt)
	}
	if next != "" {
		resp.NextPageToken = typePageToken(false, next)
	}
	return resp, nil
}

func (h *batteryTypeServer) storeList(ctx context.Context, page store.PageRequest) ([]store.BatteryType, string, error) {
	defer h.s.metrics.observeStore(ctx, "ListBatteryTypes", time.Now())
	return h.s.store.ListBatteryTypes(ctx, tenant(ctx), page)
}

func builtinToPB(t *cell.Type) *pb.BatteryType {
	out := typeToPB(t, batteryTypeName(t.Name))
	out.DisplayName = t.Name
	out.BuiltIn = true
	return out
}

func storedTypeToPB(st store.BatteryType) (*pb.BatteryType, error) {
	t, err := decodeType(st)
	if err != nil {
		return nil, err
	}
	out := typeToPB(t, batteryTypeName(st.Name))
	out.DisplayName = st.DisplayName
	out.CreateTime = timestamppb.New(st.CreateTime)
	if st.CalibrationID != "" {
		out.Calibration = calibrationName(st.CalibrationID)
	}
	return out, nil
}

// decodeType decodes a stored parameter set (the model's JSON form of a type).
func decodeType(st store.BatteryType) (*cell.Type, error) {
	var t cell.Type
	if err := json.Unmarshal(st.Parameters, &t); err != nil {
		return nil, fmt.Errorf("decoding stored battery type %q: %w", st.Name, err)
	}
	if err := t.Validate(); err != nil {
		return nil, fmt.Errorf("stored battery type %q is invalid: %w", st.Name, err)
	}
	t.Name = st.Name
	return &t, nil
}

// lookupType returns the type a resource name refers to: built-in first, then the
// store. field names the request field for errors.
func (s *Service) lookupType(ctx context.Context, field, name string) (*cell.Type, error) {
	id, err := parseName(field, name, collBatteryTypes)
	if err != nil {
		return nil, err
	}
	if t, err := chem.Lookup(id); err == nil {
		return t, nil
	}
	st, err := s.getStoredType(ctx, id)
	if err != nil {
		return nil, err
	}
	return decodeType(st)
}

func (s *Service) getStoredType(ctx context.Context, id string) (store.BatteryType, error) {
	defer s.metrics.observeStore(ctx, "GetBatteryType", time.Now())
	st, err := s.store.GetBatteryType(ctx, tenant(ctx), id)
	return st, resourceErr(err, batteryTypeName(id))
}

func (h *batteryTypeServer) GetBatteryType(ctx context.Context, req *pb.GetBatteryTypeRequest) (*pb.GetBatteryTypeResponse, error) {
	bt, err := h.get(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.GetBatteryTypeResponse{BatteryType: bt}, nil
}

func (h *batteryTypeServer) get(ctx context.Context, req *pb.GetBatteryTypeRequest) (*pb.BatteryType, error) {
	id, err := parseName("name", req.GetName(), collBatteryTypes)
	if err != nil {
		return nil, err
	}
	if t, err := chem.Lookup(id); err == nil {
		return builtinToPB(t), nil
	}
	st, err := h.s.getStoredType(ctx, id)
	if err != nil {
		return nil, err
	}
	return storedTypeToPB(st)
}

func (h *batteryTypeServer) CreateBatteryType(ctx context.Context, req *pb.CreateBatteryTypeRequest) (*pb.CreateBatteryTypeResponse, error) {
	bt, err := h.create(ctx, req)
	if err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.CreateBatteryTypeResponse{BatteryType: bt}, nil
}

const maxRequestID = 64

func (h *batteryTypeServer) create(ctx context.Context, req *pb.CreateBatteryTypeRequest) (*pb.BatteryType, error) {
	var v violations
	id := req.GetBatteryTypeId()
	checkID(&v, "battery_type_id", id)
	if n := len(req.GetRequestId()); n > maxRequestID {
		v.add("request_id", "at most %d bytes, got %d", maxRequestID, n)
	}
	if req.GetCalibration() == "" && req.GetBatteryType() == nil {
		v.add("battery_type", "is required unless calibration is set")
	}
	if n := len(req.GetBatteryType().GetDisplayName()); n > maxDisplayName {
		v.add("battery_type.display_name", "at most %d bytes, got %d", maxDisplayName, n)
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	var t *cell.Type
	var calID string
	if c := req.GetCalibration(); c != "" {
		ft, cid, err := h.s.fittedType(ctx, "calibration", c)
		if err != nil {
			return nil, err
		}
		t, calID = ft, cid
		t.Name = id
		if d := req.GetBatteryType().GetDescription(); d != "" {
			if len(d) > maxDescription {
				return nil, invalid("battery_type.description", "at most %d bytes, got %d", maxDescription, len(d))
			}
			t.Description = d
		}
	} else {
		var err error
		if t, err = typeFromPB("battery_type", req.GetBatteryType(), id); err != nil {
			return nil, err
		}
	}
	if _, err := chem.Lookup(id); err == nil {
		return nil, &Error{Code: codes.AlreadyExists, Reason: ReasonAlreadyExists, Msg: "a built-in type has that id", Resource: batteryTypeName(id)}
	}
	params, err := json.Marshal(t)
	if err != nil {
		return nil, fmt.Errorf("encoding battery type: %w", err)
	}
	start := time.Now()
	st, err := h.s.store.CreateBatteryType(ctx, tenant(ctx), store.BatteryType{
		Name:          id,
		DisplayName:   req.GetBatteryType().GetDisplayName(),
		Chemistry:     string(t.Chemistry),
		Parameters:    params,
		CalibrationID: calID,
	}, req.GetRequestId())
	h.s.metrics.observeStore(ctx, "CreateBatteryType", start)
	if err != nil {
		return nil, resourceErr(err, batteryTypeName(id))
	}
	return storedTypeToPB(st)
}

func (h *batteryTypeServer) DeleteBatteryType(ctx context.Context, req *pb.DeleteBatteryTypeRequest) (*pb.DeleteBatteryTypeResponse, error) {
	if err := h.delete(ctx, req); err != nil {
		return nil, h.s.status(ctx, err)
	}
	return &pb.DeleteBatteryTypeResponse{}, nil
}

func (h *batteryTypeServer) delete(ctx context.Context, req *pb.DeleteBatteryTypeRequest) error {
	id, err := parseName("name", req.GetName(), collBatteryTypes)
	if err != nil {
		return err
	}
	if _, err := chem.Lookup(id); err == nil {
		return &Error{Code: codes.FailedPrecondition, Reason: ReasonBuiltIn, Msg: "built-in battery types cannot be deleted",
			Resource: req.GetName(), Violations: []Violation{{Field: ReasonBuiltIn, Description: "the type belongs to the read-only built-in catalogue"}}}
	}
	defer h.s.metrics.observeStore(ctx, "DeleteBatteryType", time.Now())
	err = h.s.store.DeleteBatteryType(ctx, tenant(ctx), id, store.AnyVersion)
	if errors.Is(err, store.ErrInUse) {
		return &Error{Code: codes.FailedPrecondition, Reason: ReasonInUse, Msg: "batteries still refer to this type; delete them first",
			Resource: req.GetName(), Violations: []Violation{{Field: ReasonInUse, Description: "batteries still refer to the type"}}, Err: err}
	}
	return resourceErr(err, req.GetName())
}
