package service

// SetCalibrationHook makes the calibration runner call f with a job's id after it
// marks the job RUNNING and before the fit starts, so that tests can hold a job there.
func SetCalibrationHook(s *Service, f func(id string)) { s.calHook = f }
