package service

import (
	pb "github.com/voltcast/voltcast/proto/voltcast/v1"
)

// forecastServer serves ForecastService. Its calls need model/forecast, model/charge
// and model/ageing; until they are wired in, the embedded Unimplemented server answers
// UNIMPLEMENTED.
type forecastServer struct {
	pb.UnimplementedForecastServiceServer
	s *Service
}
