package estimate

import (
	"errors"
	"math"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/voltcast/voltcast/model/cell"
)

// Sample is one telemetry sample of a pack.
type Sample struct {
	Time        float64 // s, absolute or relative; must increase strictly from sample to sample
	Current     float64 // pack current, A; POSITIVE = DISCHARGE, negative = charge
	Voltage     float64 // pack terminal voltage, V
	Temperature float64 // cell temperature, K (not °C: use cell.Kelvin)
}

// Flags describe what happened to one sample. Several may be set at once.
type Flags uint16

const (
	// FlagRejected marks a voltage rejected by the innovation gate as an outlier: the
	// prediction was kept, the measurement not used.
	FlagRejected Flags = 1 << iota
	// FlagForced marks a measurement accepted after Settings.MaxRejections
	// consecutive rejections, with the covariance of the dynamic states inflated.
	FlagForced
	// FlagInvalid marks a sample with a NaN, infinite or saturated reading; it was
	// ignored and the state left unchanged.
	FlagInvalid
	// FlagRest marks a sample taken while the pack was at rest.
	FlagRest
	// FlagGap marks an interval longer than Settings.MaxHold: the current was held
	// only for MaxHold and the rest of the interval treated as a rest.
	FlagGap
	// FlagTemperatureRange marks a temperature outside the range the type is
	// modelled for (its discharge or charge window, or its OCV table's temperatures).
	FlagTemperatureRange
	// FlagSOCRange marks an internal state of charge outside [0, 1]; the reported
	// SOC is clamped, and the internal one is held within [−0.05, 1.05].
	FlagSOCRange
	// FlagHealthClamped marks a health state held at its bound.
	FlagHealthClamped
	// FlagRepaired marks a covariance that lost positive definiteness and was
	// repaired.
	FlagRepaired
	// FlagError marks a sample whose Update returned an error (set by [Run]).
	FlagError
)

var flagNames = [...]string{"rejected", "forced", "invalid", "rest", "gap", "temperature-range",
	"soc-range", "health-clamped", "repaired", "error"}

// String returns the names of the set flags joined by "|", or "" when none is set.
func (f Flags) String() string {
	var b strings.Builder
	for i, n := range flagNames {
		if f&(1<<i) != 0 {
			if b.Len() > 0 {
				b.WriteByte('|')
			}
			b.WriteString(n)
		}
	}
	return b.String()
}

// Estimate is an estimator's output for one sample.
type Estimate struct {
	Time     float64 // s, the sample's time
	SOC      float64 // state of charge, clamped to [0, 1]
	SOCSigma float64 // standard deviation of SOC (fraction)
	// Voltage is the modelled pack terminal voltage at the sample, V, from the
	// predicted state (before the measurement update), so Innovation = measured −
	// Voltage.
	Voltage float64
	// Innovation is measured minus modelled pack voltage, V (0 for invalid samples).
	Innovation float64
	// InnovationSigma is the predicted standard deviation of the innovation, V (EKF
	// only; 0 for the counter).
	InnovationSigma float64
	// NIS is the normalised innovation squared, Innovation²/InnovationSigma² (EKF
	// only), the statistic the gate tests.
	NIS float64
	// CapacityFactor and ResistanceFactor are the pack's present capacity and
	// resistance relative to the type's rated values (1 = new), with their standard
	// deviations; the sigmas are 0 when health estimation is off and the factors are
	// the fixed values of the pack.
	CapacityFactor, CapacitySigma     float64
	ResistanceFactor, ResistanceSigma float64
	Flags                             Flags
}

// Timing says over which interval a sample's current flowed.
type Timing int

const (
	// IntervalAverage (the default) takes a sample's current as the mean current over
	// the interval since the previous sample, the way lab testers and most battery
	// management systems report it.
	IntervalAverage Timing = iota
	// SampleAndHold takes a sample's current as flowing from its own time until the
	// next sample (zero-order hold of instantaneous readings).
	SampleAndHold
)

// Settings configure an estimator. A zero field selects its default, which each
// field's comment states; pass nil for all defaults. Voltages are per cell (scaled by
// the series count for the pack); currents are pack currents.
//
// The defaults follow the noise a typical installation has. The voltage a filter sees
// differs from the model by sensor noise (a few mV per cell) plus model error, which
// for an equivalent circuit is 10–30 mV under load (the project's fit target is
// ≤ 15 mV RMSE at 25 °C) and a few mV at rest, where only the OCV table's error
// remains. Model error is not white: it follows the operating point and stays
// correlated for minutes, which ModelCorrelationTime accounts for. The defaults were
// checked on the development datasets (pan18650pf and dmegc_inr18650 drive cycles at
// 25 °C, with simple types built from each dataset's own rested voltages), where they
// gave lower SOC error than 10 mV or uncorrelated model noise. The SOC drifts because of current-sensor offset: REFERENCE.md §2.2 gives
// 10 mA on 2.5 Ah as 0.4 %/h, which sets the random-walk default; a gain error of the
// charge count (sensor gain, capacity mismatch) adds noise in proportion to the charge
// passed.
type Settings struct {
	// VoltageSigma is the voltage sensor's standard deviation per cell, V.
	// Default 0.002 (2 mV, common practice for cell monitoring front ends
	// [from memory]).
	VoltageSigma float64
	// ModelSigma is the model's voltage error per cell under load, V. Default 0.020.
	// Set it to the voltage RMSE of the type's fit when known (a fitted type reaches
	// 10–15 mV at 25 °C; generic catalogue types and hand-made ones err by 20–50 mV).
	ModelSigma float64
	// RestModelSigma is the model's voltage error per cell at rest, V. Default 0.004.
	RestModelSigma float64
	// ParameterError is the relative error of the modelled ohmic drop and
	// polarisation voltages, which makes the model error grow with the load: the model
	// variance under load gains (ParameterError·(R0·|i| + Σ|vₖ|))² per cell. Equivalent
	// circuits are usually identified at one or two currents and used at others, where
	// their resistances err by tens of per cent. Default 0.2; a negative value adds
	// nothing.
	ParameterError float64
	// ModelCorrelationTime is how long the model's voltage error stays correlated, s.
	// Samples closer together than this do not carry independent information about
	// the model error, so for a sample interval Δt the model variance is scaled by
	// max(1, ModelCorrelationTime/Δt): the filter then learns as much from an hour of
	// 1 Hz data as from an hour of 0.1 Hz data, instead of treating the same slowly
	// varying model error as thousands of independent observations. Default 60.
	ModelCorrelationTime float64
	// CurrentSigma is the current sensor's standard deviation (pack), A. Default 0.5 %
	// of the pack's 1 C current [common practice: Hall and shunt sensors of 0.5–1 %
	// full scale; from memory].
	CurrentSigma float64
	// SOCDrift is the SOC random walk, fraction per √h. Default 0.004 (REFERENCE.md
	// §2.2: a 10 mA offset on 2.5 Ah drifts 0.4 %/h).
	SOCDrift float64
	// GapSOCDrift is the SOC random walk during a gap in the log (the part of an
	// interval beyond MaxHold), fraction per √h. A gap is modelled as a rest, but the
	// pack may have been charged or used while nothing was logged; this lets the first
	// voltage after the gap correct the SOC quickly. Default 0.2 (a one-hour gap
	// leaves the SOC uncertain by 20 %; gaps never raise the SOC standard deviation
	// beyond 0.3); a negative value adds nothing beyond SOCDrift.
	GapSOCDrift float64
	// ChargeGainSigma is the relative error of the charge count (current gain and
	// capacity mismatch); it adds ChargeGainSigma·|ΔSOC| of SOC noise per step.
	// Default 0.01.
	ChargeGainSigma float64
	// BranchDrift is the random walk of each RC branch voltage and of the
	// hysteresis voltage per cell, V per √s, standing for the model's dynamic error.
	// Default 0.0002.
	BranchDrift float64

	// InitialSOCSigma is the standard deviation of an SOC given to InitSOC.
	// Default 0.1.
	InitialSOCSigma float64
	// InitialBranchSigma is the initial standard deviation of each RC branch voltage
	// per cell, V. Default 0.005.
	InitialBranchSigma float64

	// GateProbability sets the innovation gate: a measurement is rejected when its
	// normalised innovation squared exceeds the chi-square (1 degree of freedom)
	// quantile at this probability. Default 0.9999 (a gate of 15.1); 1 disables
	// gating.
	GateProbability float64
	// MaxRejections is the number of consecutive samples with an implausible
	// innovation (rejected by the gate, or beyond 3σ) after which the filter inflates
	// its covariance and accepts the measurement. Default 10.
	MaxRejections int

	// RestCurrent is the largest |pack current| that counts as rest, A. Default
	// C/50 of the pack.
	RestCurrent float64
	// RestDuration is how long the current must stay below RestCurrent before the
	// pack counts as resting, s. Default 300.
	RestDuration float64

	// Timing says how a sample's current relates to the interval (default
	// IntervalAverage).
	Timing Timing
	// MaxHold is the longest time a current is held, s; the rest of a longer
	// interval is treated as a rest at zero current. Default 60.
	MaxHold float64

	// MaxCurrentFactor bounds a plausible current: |i| above MaxCurrentFactor × the
	// type's largest C-rate (charge or discharge) × the pack capacity is an error,
	// most likely milliamperes passed as amperes. Default 20.
	MaxCurrentFactor float64
	// VoltageMin and VoltageMax are the pack voltage sensor's range, V: a reading at
	// or beyond either is saturated and ignored. Defaults 0 and 1.25 × the
	// highest OCV (or charge voltage) of the pack.
	VoltageMin, VoltageMax float64
	// CurrentMax is the current sensor's full scale (pack), A: |i| at or above it is
	// saturated and ignored. Default none (+Inf).
	CurrentMax float64

	// Health enables the slow state-of-health states, the capacity factor and the
	// resistance factor (EKF only). Default off.
	Health bool
	// CapacitySigma and ResistanceSigma are the initial standard deviations of the
	// health states. Defaults 0.05 and 0.2.
	CapacitySigma, ResistanceSigma float64
	// CapacityDrift and ResistanceDrift are their random walks per √h. Defaults
	// 0.002 and 0.005.
	CapacityDrift, ResistanceDrift float64
}

// ErrSettings is matched by every error from [Settings.Validate].
var ErrSettings = errors.New("invalid estimator settings")

// Validate checks that every field is finite and in range.
func (s *Settings) Validate() error {
	if s == nil {
		return nil
	}
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"voltage_sigma", s.VoltageSigma}, {"model_sigma", s.ModelSigma},
		{"rest_model_sigma", s.RestModelSigma}, {"model_correlation_time", s.ModelCorrelationTime},
		{"parameter_error", math.Abs(s.ParameterError)},
		{"current_sigma", s.CurrentSigma},
		{"soc_drift", s.SOCDrift}, {"gap_soc_drift", math.Abs(s.GapSOCDrift)}, {"charge_gain_sigma", s.ChargeGainSigma},
		{"branch_drift", s.BranchDrift}, {"initial_soc_sigma", s.InitialSOCSigma},
		{"initial_branch_sigma", s.InitialBranchSigma}, {"rest_current", s.RestCurrent},
		{"rest_duration", s.RestDuration}, {"max_hold", s.MaxHold},
		{"max_current_factor", s.MaxCurrentFactor}, {"voltage_min", s.VoltageMin},
		{"voltage_max", s.VoltageMax}, {"current_max", s.CurrentMax},
		{"capacity_sigma", s.CapacitySigma}, {"resistance_sigma", s.ResistanceSigma},
		{"capacity_drift", s.CapacityDrift}, {"resistance_drift", s.ResistanceDrift},
	} {
		if !cell.Finite(f.v) || f.v < 0 {
			return &settingsError{cell.Invalid(f.name, "must be finite and non-negative, got %g", f.v)}
		}
	}
	if p := s.GateProbability; !(p >= 0 && p <= 1) {
		return &settingsError{cell.Invalid("gate_probability", "must be in (0, 1], got %g", p)}
	}
	if s.MaxRejections < 0 {
		return &settingsError{cell.Invalid("max_rejections", "must be non-negative, got %d", s.MaxRejections)}
	}
	if s.Timing != IntervalAverage && s.Timing != SampleAndHold {
		return &settingsError{cell.Invalid("timing", "unknown current timing %d", s.Timing)}
	}
	if s.VoltageMax != 0 && s.VoltageMax <= s.VoltageMin {
		return &settingsError{cell.Invalid("voltage_max", "sensor range %g to %g V is empty", s.VoltageMin, s.VoltageMax)}
	}
	if s.InitialSOCSigma > 1 {
		return &settingsError{cell.Invalid("initial_soc_sigma", "must be at most 1, got %g", s.InitialSOCSigma)}
	}
	return nil
}

// settingsError wraps a field error so that it matches both ErrSettings and
// cell.ErrInvalid.
type settingsError struct{ err error }

func (e *settingsError) Error() string { return "estimate settings: " + e.err.Error() }
func (e *settingsError) Unwrap() error { return e.err }

// Is matches ErrSettings.
func (e *settingsError) Is(target error) bool { return target == ErrSettings }

// config is Settings with every default resolved for one pack, in pack units.
type config struct {
	voltVar      float64 // pack V², sensor
	modelVar     float64 // pack V², model under load
	restModelVar float64 // pack V², model at rest
	modelTau     float64 // s, model error correlation time
	paramErr2    float64 // relative², error of the ohmic and polarisation drops
	currentVar   float64 // pack A²
	socVarRate   float64 // 1/s
	gapVarRate   float64 // 1/s, extra during gaps
	gainVar      float64 // relative², per |ΔSOC|²
	branchVar    float64 // cell V² per s
	initSOCVar   float64
	initBranch   float64 // cell V²
	gate         float64 // NIS threshold
	maxReject    int
	biasTime     float64 // s, averaging time of the normalised innovation
	restCurrent  float64 // pack A
	restDuration float64 // s
	timing       Timing
	maxHold      float64 // s
	maxCurrent   float64 // pack A; beyond is an error
	curFactor    float64 // maxCurrent as a multiple of the largest rated current
	vMin, vMax   float64 // pack V sensor range
	iSat         float64 // pack A sensor full scale
	health       bool
	capVar0      float64
	resVar0      float64
	capVarRate   float64 // 1/s
	resVarRate   float64 // 1/s
}

func or(v, def float64) float64 {
	if v == 0 {
		return def
	}
	return v
}

// resolve fills the defaults of s for pack p. The pack must be valid.
func resolve(p cell.Pack, s *Settings) config {
	if s == nil {
		s = &Settings{}
	}
	sq := func(v float64) float64 { return v * v }
	ns := float64(p.Series)
	oneC := p.RatedCapacityAh() // A
	t := p.Type
	c := config{
		voltVar:      sq(ns * or(s.VoltageSigma, 0.002)),
		modelVar:     sq(ns * or(s.ModelSigma, 0.020)),
		restModelVar: sq(ns * or(s.RestModelSigma, 0.004)),
		modelTau:     or(s.ModelCorrelationTime, 60),
		paramErr2:    sq(or(s.ParameterError, 0.2)),
		currentVar:   sq(or(s.CurrentSigma, 0.005*oneC)),
		socVarRate:   sq(or(s.SOCDrift, 0.004)) / 3600,
		gapVarRate:   sq(or(s.GapSOCDrift, 0.2)) / 3600,
		gainVar:      sq(or(s.ChargeGainSigma, 0.01)),
		branchVar:    sq(or(s.BranchDrift, 0.0002)),
		initSOCVar:   sq(or(s.InitialSOCSigma, 0.1)),
		initBranch:   sq(or(s.InitialBranchSigma, 0.005)),
		maxReject:    s.MaxRejections,
		restCurrent:  or(s.RestCurrent, oneC/50),
		restDuration: or(s.RestDuration, 300),
		timing:       s.Timing,
		maxHold:      or(s.MaxHold, 60),
		iSat:         or(s.CurrentMax, math.Inf(1)),
		health:       s.Health,
		capVar0:      sq(or(s.CapacitySigma, 0.05)),
		resVar0:      sq(or(s.ResistanceSigma, 0.2)),
		capVarRate:   sq(or(s.CapacityDrift, 0.002)) / 3600,
		resVarRate:   sq(or(s.ResistanceDrift, 0.005)) / 3600,
	}
	if s.ParameterError < 0 {
		c.paramErr2 = 0
	}
	if s.GapSOCDrift < 0 {
		c.gapVarRate = 0
	}
	if c.maxReject == 0 {
		c.maxReject = 10
	}
	c.biasTime = 10 * c.modelTau
	gp := or(s.GateProbability, 0.9999)
	c.gate = math.Inf(1)
	if gp < 1 {
		c.gate = distuv.ChiSquared{K: 1}.Quantile(gp)
	}
	rate := max(t.Limits.MaxDischargeRate, t.Limits.MaxChargeRate)
	c.curFactor = or(s.MaxCurrentFactor, 20)
	c.maxCurrent = c.curFactor * rate * oneC
	top := t.Limits.ChargeVolts
	for _, tk := range t.OCV.Temps() {
		_, hi := t.OCV.Curve(0).Domain()
		top = max(top, t.OCV.At(hi, tk))
	}
	c.vMin = s.VoltageMin
	c.vMax = or(s.VoltageMax, 1.25*top*ns)
	return c
}
