package charge

import (
	"errors"
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// ErrPrimaryCell is wrapped by the refusal to plan a charge for a primary
// (non-rechargeable) cell, whose charge method is [cell.ChargeNone]. Charging a primary
// cell can make it leak, rupture, vent or burn.
var ErrPrimaryCell = errors.New("primary cells must never be charged")

// ErrTemperature is wrapped by the refusal to charge outside the type's charge
// temperature window.
var ErrTemperature = errors.New("temperature outside the charge window")

// Request is the charge problem. Charger limits are magnitudes (positive numbers); a
// zero optional field means "no limit" or "default" as its comment says.
type Request struct {
	// Pack is the pack to charge; its Type must be valid.
	Pack cell.Pack
	// State is the pack's state at the start of the charge.
	State cell.State
	// TemperatureCelsius is the cell (and ambient) temperature, °C, −60…100; it is held
	// constant over the charge.
	TemperatureCelsius float64
	// TargetSOC is the state of charge to reach, a fraction in (0, 1]; 0 means 1 (full).
	TargetSOC float64
	// MaxCurrentAmps is the charger's current limit, A; required, > 0.
	MaxCurrentAmps float64
	// MaxVoltageVolts is the charger's voltage limit at the pack terminals, V; 0 means
	// the charger can reach whatever the chemistry needs.
	MaxVoltageVolts float64
	// MaxPowerWatts is the charger's output power limit, W; 0 means no limit.
	MaxPowerWatts float64
	// Efficiency is the charger's efficiency from supply to pack, in (0, 1]; required.
	Efficiency float64
	// DeadlineSeconds, when positive, asks for the lowest current that reaches the
	// target within this many seconds.
	DeadlineSeconds float64
	// TerminationRate overrides the type's taper termination current, as a C-rate
	// (e.g. 0.05 for C/20); 0 uses the type's value, or C/20 if the type has none.
	TerminationRate float64
}

// Settings tune the simulation. A nil *Settings, or a zero field, selects the default
// given in the field's comment.
type Settings struct {
	// MaxSOCStep is the largest change of state of charge in one constant-current step.
	// Default 0.01.
	MaxSOCStep float64
	// CurrentChange is the relative change of current aimed at per constant-voltage
	// step. Default 0.01.
	CurrentChange float64
	// MaxStepSeconds is the longest step. Default 600 s.
	MaxStepSeconds float64
	// MaxSeconds is the longest charge simulated; a charge not finished by then is
	// reported as not reaching full. Default 72 h.
	MaxSeconds float64
	// AbsorptionMaxSeconds ends a lead-acid absorption phase that has not tapered.
	// Default 4 h (absorption for 2–4 h, REFERENCE.md §1a [from memory]).
	AbsorptionMaxSeconds float64
	// NickelOvercharge is the charge, as a fraction of rated capacity, put into a full
	// nickel cell before −ΔV is taken as detected. Default 0.05 [assumed: the voltage
	// peaks at full and falls by −ΔV after a few minutes of overcharge].
	NickelOvercharge float64
	// SOCCeiling is the state of charge at which the model counts the cell full even if
	// the current has not tapered (the type's OCV table tops out below the charge
	// voltage, so the model would otherwise charge on past full). Default 1.
	SOCCeiling float64
}

func (s *Settings) withDefaults() Settings {
	var out Settings
	if s != nil {
		out = *s
	}
	def := func(v *float64, d float64) {
		if *v <= 0 || !cell.Finite(*v) {
			*v = d
		}
	}
	def(&out.MaxSOCStep, 0.01)
	def(&out.CurrentChange, 0.01)
	def(&out.MaxStepSeconds, 600)
	def(&out.MaxSeconds, 72*3600)
	def(&out.AbsorptionMaxSeconds, 4*3600)
	def(&out.NickelOvercharge, 0.05)
	def(&out.SOCCeiling, 1)
	return out
}

// PhaseKind names a phase of a charge.
type PhaseKind string

// Phase kinds.
const (
	PhasePrecharge       PhaseKind = "precharge"        // lithium below its cut-off voltage: gentle constant current
	PhaseConstantCurrent PhaseKind = "constant-current" // charger at its current limit
	PhaseConstantPower   PhaseKind = "constant-power"   // charger at its power limit
	PhaseConstantVoltage PhaseKind = "constant-voltage" // lithium CV at the charge voltage, current tapering
	PhaseBulk            PhaseKind = "bulk"             // lead-acid constant current (or power)
	PhaseAbsorption      PhaseKind = "absorption"       // lead-acid CV at the absorption voltage
	PhaseFloat           PhaseKind = "float"            // lead-acid CV at the float voltage
	PhaseOvercharge      PhaseKind = "overcharge"       // nickel: charge past full until −ΔV or the timer
)

// Phase is one stage of the plan. Currents are pack currents with the project's sign
// (negative on charge); voltages are pack terminal voltages.
type Phase struct {
	Kind             PhaseKind
	StartSeconds     float64
	EndSeconds       float64 // equal to StartSeconds for the open-ended float phase
	StartCurrentAmps float64
	EndCurrentAmps   float64
	StartVolts       float64
	EndVolts         float64
	StartSOC         float64
	EndSOC           float64
	ChargeAh         float64 // into the pack during the phase
	EnergyWh         float64 // into the pack during the phase
}

// Totals are the cumulative figures at one point of the charge.
type Totals struct {
	Reached  bool    // whether the point is reached (see Result)
	Seconds  float64 // time from the start of the charge
	SOC      float64 // state of charge there (clamped to [0, 1])
	ChargeAh float64 // charge into the pack, Ah
	EnergyWh float64 // energy into the pack, Wh
	SupplyWh float64 // energy drawn from the supply, Wh (EnergyWh ÷ charger efficiency)
}

// Termination names what ended a charge.
type Termination string

// Terminations.
const (
	TerminationTaper      Termination = "taper"            // CV/absorption current fell to the termination rate
	TerminationFull       Termination = "soc-full"         // the model reached full (Settings.SOCCeiling) before the taper
	TerminationAbsorption Termination = "absorption-timer" // lead-acid absorption timer, then float tapered
	TerminationDeltaV     Termination = "minus-delta-v"    // nickel −ΔV (modelled)
	TerminationTimer      Termination = "timer"            // nickel timer (standard charge or backup)
	TerminationCeiling    Termination = "voltage-ceiling"  // nickel voltage ceiling or charger voltage limit
	TerminationNone       Termination = "none"             // not finished within the horizon
)

// WarningCode identifies a warning; the set is open.
type WarningCode string

// Warning codes.
const (
	WarnColdDerate       WarningCode = "cold-derate"          // current reduced because the cell is cold
	WarnFrozen           WarningCode = "below-freezing"       // lead-acid below 0 °C: never charge frozen electrolyte
	WarnCurrentCapped    WarningCode = "current-capped"       // charger current above the cell's maximum charge rate
	WarnChargerVoltLow   WarningCode = "charger-voltage-low"  // charger voltage below what a full charge needs
	WarnTargetAboveLimit WarningCode = "target-above-limit"   // target needs a voltage above the charge limit in use
	WarnTargetNotReached WarningCode = "target-not-reached"   // the charge ends below the target
	WarnDeadline         WarningCode = "deadline-unreachable" // even the largest allowed current misses the deadline
	WarnAtTarget         WarningCode = "already-at-target"    // the pack is already at or above the target
	WarnBelowCutoff      WarningCode = "below-cutoff"         // deeply discharged: precharge first
	WarnBelowFloor       WarningCode = "below-floor"          // below the floor voltage: inspect before charging
	WarnWeakDeltaV       WarningCode = "weak-delta-v"         // nickel below 0.5 C: −ΔV is unreliable
	WarnPartialNickel    WarningCode = "partial-nickel"       // nickel chargers cannot stop at a partial SOC
	WarnPartialLead      WarningCode = "partial-lead-acid"    // lead-acid left partly charged sulphates
	WarnNotFull          WarningCode = "not-full"             // the charge ends before full, or not within the horizon
	WarnVoltageCeiling   WarningCode = "voltage-ceiling"      // nickel charge stopped at the voltage ceiling
)

// Warning is a condition of the plan that the caller should show.
type Warning struct {
	Code    WarningCode
	Message string
}

// Stats describe the work done.
type Stats struct {
	Steps       int // model steps taken, over all simulations
	Simulations int // charge simulations run (more than one with a deadline)
	Evaluations int // trial steps of the constant-voltage current solver
}

// Result is a charge plan.
type Result struct {
	Method cell.ChargeMethod
	// CurrentAmps is the magnitude of the constant (bulk) current the plan uses, A:
	// the charger limit, derated or capped, or the lowest current meeting the deadline.
	CurrentAmps float64
	// ChargeVolts is the pack voltage of the constant-voltage (absorption) phase, V,
	// after temperature compensation and the charger's limit; for nickel it is the
	// voltage ceiling.
	ChargeVolts float64
	// FloatVolts is the lead-acid float voltage of the pack, V (0 otherwise).
	FloatVolts float64
	// TerminationAmps is the magnitude of the taper termination current, A (0 for nickel).
	TerminationAmps float64
	// TargetSOC is the target the plan charges to.
	TargetSOC float64
	// Phases run from the start to the target (cut there when the target is below full);
	// a lead-acid plan to full ends with an open-ended float phase.
	Phases []Phase
	// Target is where the target SOC is reached (a completed full charge reaches any
	// target); when Target.Reached is false its figures are those of the end of the
	// charge (the same as Full's). Full is where the charge terminates; Full.Reached is
	// false when it ends without the cell being full (charger voltage too low, nickel
	// voltage ceiling or backup timer before full) or does not end within
	// Settings.MaxSeconds.
	Target, Full Totals
	// Termination says what ended the full charge.
	Termination Termination
	Warnings    []Warning
	// Cautions are the standing safety notes for the chemistry; always show them.
	Cautions []string
	Stats    Stats
}

// limits are the resolved per-request quantities the simulation uses.
type limits struct {
	method    cell.ChargeMethod
	imax      float64 // A, magnitude: largest constant current allowed
	ilo       float64 // A: lowest constant current considered for a deadline
	pmax      float64 // W, 0 = none
	vset      float64 // pack CV / absorption set point, V
	vfloat    float64 // pack float voltage, V
	vceil     float64 // nickel: pack voltage that ends the charge
	iterm     float64 // A, taper termination
	vpre      float64 // pack voltage below which lithium is precharged, 0 = none
	ipre      float64 // A, precharge current
	full      bool    // whether vset is the chemistry's own limit (taper there means full)
	timedRate float64 // nickel: at or below this current the charge is timed (standard charge)
}

// validate checks the request and returns the first problem as a *cell.FieldError.
func (r *Request) validate() error {
	if err := r.Pack.Validate(); err != nil {
		return prefix("pack", err)
	}
	if err := r.Pack.Type.Validate(); err != nil {
		return prefix("pack.type", err)
	}
	if err := cell.CheckSOC("state.soc", r.State.SOC); err != nil {
		return err
	}
	for k, v := range r.State.V {
		if !cell.Finite(v) || math.Abs(v) > 10 {
			return cell.Invalid(fmt.Sprintf("state.v[%d]", k), "RC voltage must be finite and within ±10 V, got %g", v)
		}
	}
	if !cell.Finite(r.State.H) || math.Abs(r.State.H) > 1 {
		return cell.Invalid("state.h", "hysteresis voltage must be finite and within ±1 V, got %g", r.State.H)
	}
	if err := cell.CheckCelsius("temperature_celsius", r.TemperatureCelsius); err != nil {
		return err
	}
	if r.TargetSOC != 0 {
		if err := cell.CheckSOC("target_soc", r.TargetSOC); err != nil {
			return err
		}
	}
	if !cell.Finite(r.MaxCurrentAmps) || r.MaxCurrentAmps <= 0 {
		return cell.Invalid("max_current_amps", "charger current limit must be a positive magnitude, got %g", r.MaxCurrentAmps)
	}
	if !cell.Finite(r.MaxVoltageVolts) || r.MaxVoltageVolts < 0 {
		return cell.Invalid("max_voltage_volts", "charger voltage limit must be finite and non-negative (0 = none), got %g", r.MaxVoltageVolts)
	}
	if !cell.Finite(r.MaxPowerWatts) || r.MaxPowerWatts < 0 {
		return cell.Invalid("max_power_watts", "charger power limit must be finite and non-negative (0 = none), got %g", r.MaxPowerWatts)
	}
	if !cell.Finite(r.Efficiency) || r.Efficiency <= 0 || r.Efficiency > 1 {
		return cell.Invalid("efficiency", "charger efficiency must be in (0, 1], got %g", r.Efficiency)
	}
	if !cell.Finite(r.DeadlineSeconds) || r.DeadlineSeconds < 0 {
		return cell.Invalid("deadline_seconds", "deadline must be finite and non-negative (0 = none), got %g", r.DeadlineSeconds)
	}
	if !cell.Finite(r.TerminationRate) || r.TerminationRate < 0 || r.TerminationRate >= 1 {
		return cell.Invalid("termination_c_rate", "termination rate must be in [0, 1) C (0 = the type's), got %g", r.TerminationRate)
	}
	return nil
}

// prefix puts a path in front of a FieldError's field.
func prefix(p string, err error) error {
	var fe *cell.FieldError
	if errors.As(err, &fe) {
		return &cell.FieldError{Field: p + "." + fe.Field, Reason: fe.Reason}
	}
	return cell.Invalid(p, "%v", err)
}

// graphite reports whether the chemistry has a graphite anode (cold-charging plating risk).
func graphite(c cell.Chemistry) bool {
	switch c {
	case cell.ChemistryNMC, cell.ChemistryNCA, cell.ChemistryLCO, cell.ChemistryLMO, cell.ChemistryLFP:
		return true
	}
	return false
}

// Cold-charging derate for graphite-anode lithium cells: BU-410 allows fast charging
// only between 5 and 45 °C and says to cut the current in the cold [source: BU-410];
// 0.1 C below 5 °C is our choice [from memory].
const (
	coldDerateCelsius = 5
	coldDerateRate    = 0.1
)

// resolve works out the limits for the request, adding warnings to res, or refuses.
func resolve(r *Request, res *Result) (limits, error) {
	p := r.Pack
	t := p.Type
	l := t.Limits
	var lim limits
	lim.method = t.ChargeMethod
	if !t.Rechargeable() {
		return lim, fmt.Errorf("charge %s (%s): %w", t.Name, t.Chemistry, ErrPrimaryCell)
	}
	tc := r.TemperatureCelsius
	if tc < l.ChargeMinCelsius || tc > l.ChargeMaxCelsius {
		return lim, fmt.Errorf("charge %s at %g °C: %w %g to %g °C; wait until the cell is within it (the maker's datasheet governs)",
			t.Name, tc, ErrTemperature, l.ChargeMinCelsius, l.ChargeMaxCelsius)
	}
	s := float64(p.Series)
	ratedAh := p.RatedCapacityAh()
	oneC := ratedAh // A

	lim.imax = r.MaxCurrentAmps
	if cellMax := l.MaxChargeRate * oneC; lim.imax > cellMax {
		res.warn(WarnCurrentCapped, "charger current %.3g A exceeds the cell's maximum charge rate (%.3g C = %.3g A); the plan uses %.3g A",
			r.MaxCurrentAmps, l.MaxChargeRate, cellMax, cellMax)
		lim.imax = cellMax
	}
	if graphite(t.Chemistry) && tc < coldDerateCelsius {
		if derated := coldDerateRate * oneC; lim.imax > derated {
			lim.imax = derated
		}
		res.warn(WarnColdDerate, "cell at %g °C: below %g °C the current is limited to %.2g C (%.3g A) to avoid lithium plating",
			tc, float64(coldDerateCelsius), coldDerateRate, lim.imax)
	}
	if (t.Chemistry == cell.ChemistryLeadAcid || t.Chemistry == cell.ChemistryVRLA) && tc < 0 {
		if capped := 0.3 * oneC; lim.imax > capped { // ≤ 0.3 C below freezing [source: BU-410]
			lim.imax = capped
		}
		res.warn(WarnFrozen, "below freezing: charge at no more than 0.3 C and never charge a frozen battery")
	}
	lim.pmax = r.MaxPowerWatts

	rate := r.TerminationRate
	if rate == 0 {
		rate = l.TerminationRate
	}
	if rate == 0 && t.ChargeMethod != cell.ChargeNickel {
		rate = 0.05 // C/20 [common practice]
	}
	lim.iterm = rate * oneC

	// Per-cell voltages, compensated for temperature (lead-acid, BU-LA), then × S.
	comp := l.TempCompVoltsPerK * (tc - 25)
	vneed := (l.ChargeVolts + comp) * s
	lim.vset = vneed
	lim.full = true
	if r.MaxVoltageVolts > 0 && r.MaxVoltageVolts < vneed {
		res.warn(WarnChargerVoltLow, "charger voltage limit %.3f V is below the %.3f V a full charge needs; the plan stops short of full",
			r.MaxVoltageVolts, vneed)
		lim.vset = r.MaxVoltageVolts
		lim.full = false
	}
	if l.FloatVolts > 0 {
		lim.vfloat = math.Min((l.FloatVolts+comp)*s, lim.vset)
	}
	switch t.ChargeMethod {
	case cell.ChargeNickel:
		lim.vceil = lim.vset
		lim.iterm = 0
		lim.timedRate = t.Limits.StandardChargeRate * oneC
		if lim.timedRate == 0 {
			lim.timedRate = 0.1 * oneC // [source: IEC 61951-2 via summaries]
		}
		lim.ilo = lim.timedRate
	case cell.ChargeCCCV:
		// Precharge at ≤ 0.1 C below ~3.0 V (the cut-off) [common practice].
		lim.vpre = l.CutoffVolts * s
		lim.ipre = math.Min(0.1*oneC, lim.imax)
		lim.ilo = math.Max(1.5*lim.iterm, 0.02*oneC)
	default:
		lim.ilo = math.Max(1.5*lim.iterm, 0.02*oneC)
	}
	lim.ilo = math.Min(lim.ilo, lim.imax)
	return lim, nil
}

func (res *Result) warn(code WarningCode, format string, args ...any) {
	res.Warnings = append(res.Warnings, Warning{Code: code, Message: fmt.Sprintf(format, args...)})
}

// Plan returns the charge plan for the request. settings may be nil for the defaults.
// Invalid input gives a *cell.FieldError; a primary cell gives an error wrapping
// [ErrPrimaryCell]; a temperature outside the charge window one wrapping
// [ErrTemperature]. Plan does not change the request.
func Plan(req *Request, settings *Settings) (*Result, error) {
	if req == nil {
		return nil, cell.Invalid("request", "is required")
	}
	if err := req.validate(); err != nil {
		return nil, err
	}
	set := settings.withDefaults()
	t := req.Pack.Type
	res := &Result{Method: t.ChargeMethod, Cautions: Cautions(t.Chemistry, t.ChargeMethod)}
	lim, err := resolve(req, res)
	if err != nil {
		return nil, err
	}
	target := req.TargetSOC
	if target == 0 {
		target = 1
	}
	res.TargetSOC = target
	res.ChargeVolts, res.FloatVolts, res.TerminationAmps = lim.vset, lim.vfloat, lim.iterm
	precheck(req, &lim, target, res)

	e := engine{req: req, lim: &lim, set: &set, target: target}
	current := lim.imax
	if req.DeadlineSeconds > 0 && req.State.SOC < target {
		current = e.lowestCurrent(req.DeadlineSeconds, res)
	}
	res.CurrentAmps = current
	e.record = true
	out := e.simulate(current, false)
	res.Phases = out.phases
	res.Target = out.target
	res.Full = out.full
	res.Termination = out.termination
	res.Stats = Stats{Steps: e.steps, Simulations: e.sims, Evaluations: e.evals}
	postcheck(req, &lim, target, out, res)
	return res, nil
}

// precheck adds the warnings that follow from the request alone.
func precheck(req *Request, lim *limits, target float64, res *Result) {
	t := req.Pack.Type
	tk := cell.Kelvin(req.TemperatureCelsius)
	s := float64(req.Pack.Series)
	if req.State.SOC >= target {
		res.warn(WarnAtTarget, "the pack is already at %.1f %% SOC, at or above the %.1f %% target", 100*req.State.SOC, 100*target)
	}
	if t.ChargeMethod != cell.ChargeNickel {
		perCell := lim.vset / s
		if ocv := t.OCV.At(target, tk); ocv >= perCell {
			res.warn(WarnTargetAboveLimit, "the %.1f %% target needs a rest voltage of %.3f V/cell, at or above the %.3f V/cell charge limit in use",
				100*target, ocv, perCell)
		}
	}
	rest := req.Pack.Voltage(&req.State, 0, tk)
	if lim.vpre > 0 && rest < lim.vpre {
		res.warn(WarnBelowCutoff, "pack at %.3f V is below its %.3f V cut-off: the plan precharges at %.3g A first", rest, lim.vpre, lim.ipre)
	}
	if floor := t.Limits.FloorVolts * s; graphite(t.Chemistry) && rest < floor {
		res.warn(WarnBelowFloor, "pack at %.3f V is below the %.3f V floor: the cell may be damaged; check the maker's datasheet before charging it at all", rest, floor)
	}
	switch t.ChargeMethod {
	case cell.ChargeNickel:
		if target < 1 {
			res.warn(WarnPartialNickel, "nickel chargers have no voltage signature to stop at %.0f %%; only the timed estimate is shown", 100*target)
		}
	case cell.ChargeThreeStage:
		if target < 1 {
			res.warn(WarnPartialLead, "lead-acid left partly charged sulphates; charge it fully regularly")
		}
	}
}

// postcheck adds the warnings that follow from the simulation.
func postcheck(req *Request, lim *limits, target float64, out outcome, res *Result) {
	if !out.full.Reached {
		if out.termination == TerminationNone {
			res.warn(WarnNotFull, "the charge does not finish within the simulated horizon")
		} else {
			res.warn(WarnNotFull, "the charge ends (%s) at %.1f %% SOC, before the cell is full", out.termination, 100*out.full.SOC)
		}
	}
	if !out.target.Reached && req.State.SOC < target {
		res.warn(WarnTargetNotReached, "the charge ends at %.1f %% SOC, below the %.1f %% target", 100*out.full.SOC, 100*target)
	}
	if out.termination == TerminationCeiling {
		res.warn(WarnVoltageCeiling, "the charge stopped at the %.3f V voltage ceiling before the cell was full (cold or high current?)", lim.vceil)
	}
	if lim.method == cell.ChargeNickel && res.CurrentAmps > lim.timedRate*(1+1e-9) && res.CurrentAmps < 0.5*req.Pack.RatedCapacityAh() {
		res.warn(WarnWeakDeltaV, "at %.2g C the −ΔV signature is weak; the charger must also stop on zero slope, dT/dt and its backup timer",
			res.CurrentAmps/req.Pack.RatedCapacityAh())
	}
}
