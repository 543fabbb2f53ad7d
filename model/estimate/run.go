package estimate

// Estimator tracks the state of charge of one pack from telemetry. [EKF] and [Counter]
// implement it.
type Estimator interface {
	// Update processes the next sample and returns the estimate after it.
	Update(s Sample) (Estimate, error)
	// InitSOC restarts the estimate at a known state of charge.
	InitSOC(soc float64) error
	// InitFromVoltage restarts the estimate from a rested pack voltage (V) at a
	// temperature (K).
	InitFromVoltage(v, tk float64) error
	// State returns the complete state, for persisting.
	State() State
	// Restore continues from a state returned by State.
	Restore(st State) error
	// Counters returns what the estimator has done so far.
	Counters() Counters
}

var (
	_ Estimator = (*EKF)(nil)
	_ Estimator = (*Counter)(nil)
)

// Result is the outcome of [Run].
type Result struct {
	// Estimates holds one estimate per sample, in order. A sample whose Update
	// failed carries FlagError and the unchanged state.
	Estimates []Estimate
	// Errors is the number of samples whose Update failed, and FirstError the first
	// such error with its sample index.
	Errors     int
	FirstError error
	FirstIndex int
	// Counters are the estimator's counters at the end.
	Counters Counters
}

// Run feeds samples to e in order and collects one estimate per sample into dst
// (reusing its storage; nil is fine). A sample that e refuses with an error is
// flagged FlagError and counted, and the run goes on, so the estimates stay aligned
// with the samples. Run is the entry point for batch work and validation, for example
//
//	f, _ := estimate.NewEKF(pack, 0.8, nil)
//	res := estimate.Run(nil, f, samples)
func Run(dst []Estimate, e Estimator, samples []Sample) Result {
	res := Result{Estimates: dst[:0], FirstIndex: -1}
	for i, s := range samples {
		est, err := e.Update(s)
		if err != nil {
			est.Flags |= FlagError
			if res.Errors == 0 {
				res.FirstError, res.FirstIndex = err, i
			}
			res.Errors++
		}
		res.Estimates = append(res.Estimates, est)
	}
	res.Counters = e.Counters()
	return res
}
