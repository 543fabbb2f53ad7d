package service

import (
	"context"

	"google.golang.org/grpc/codes"

	"github.com/voltcast/voltcast/model/cell"
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// calibrationServer serves CalibrationService. Its calls need model/fit; until it is
// wired in, the embedded Unimplemented server answers UNIMPLEMENTED.
type calibrationServer struct {
	pb.UnimplementedCalibrationServiceServer
	s *Service
}

// fittedType returns the type fitted by a succeeded calibration.
func (s *Service) fittedType(_ context.Context, field, name string) (*cell.Type, error) {
	if _, err := parseName(field, name, collCalibrations); err != nil {
		return nil, err
	}
	return nil, &Error{Code: codes.Unimplemented, Reason: ReasonNotImplemented, Msg: "calibrations are not available yet"}
}
