package demo

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"github.com/voltcast/voltcast/model/cell"
	"github.com/voltcast/voltcast/model/chem"
	"github.com/voltcast/voltcast/model/sim"
)

// Everything in this file is invented for the demo: the organisations, their packs and
// how they use them. The names are ours; any likeness to a real business is accidental.
// These profiles feed demonstrations only and are never a test oracle.

// Organisations of the demo fleet (fleet label values).
const (
	orgCouriers = "vellum-street-couriers" // a cooperative of cargo e-bike couriers
	orgBakery   = "saltgrain-bakery"       // a bakery with backup storage for its freezers and till
	orgSurvey   = "cobblefield-survey"     // a land surveyor's handheld instruments
)

// usage is how one demo battery is used: it chooses the pack current of each step.
type usage interface {
	// current returns the pack current (A, positive = discharge) to hold over the
	// step of dt seconds that starts at t (seconds since the replay epoch), and the
	// ambient temperature (°C) of the step. u holds the true state before the step.
	current(u *unit, t, dt float64) (amps, celsius float64)
}

// spec describes one battery of the demo fleet.
type spec struct {
	id          string
	displayName string
	typeName    string // built-in catalogue type
	series      int
	parallel    int
	labels      map[string]string
	// The true pack differs a little from new (it is what the telemetry comes from;
	// the server has to find out by itself).
	capacityFactor   float64
	resistanceFactor float64
	initialSOC       float64 // true state of charge at the replay epoch
	newUsage         func(rng *rand.Rand) usage
}

// fleet returns the demo fleet, in registration order.
func fleet() []spec {
	var out []spec
	for k := 1; k <= 4; k++ {
		bike := k
		out = append(out, spec{
			id:          fmt.Sprintf("vellum-cargo-%02d", k),
			displayName: fmt.Sprintf("Vellum Street Couriers — cargo bike %d", k),
			typeName:    "generic-nmc-18650", series: 13, parallel: 4,
			labels:         map[string]string{"fleet": orgCouriers, "kind": "cargo-e-bike", "depot": []string{"north", "north", "canal", "canal"}[k-1], "demo": "true"},
			capacityFactor: []float64{1.0, 0.96, 0.93, 0.89}[k-1], resistanceFactor: []float64{1.0, 1.08, 1.15, 1.3}[k-1],
			initialSOC: []float64{0.92, 0.85, 0.97, 0.9}[k-1],
			newUsage: func(rng *rand.Rand) usage {
				return &cargoBike{
					intensity: []float64{0.75, 0.9, 1.05, 0.85}[bike-1],
					topUp:     bike == 2 || bike == 3, // these two top up at the depot at midday
					rng:       rng,
				}
			},
		})
	}
	out = append(out,
		spec{
			id: "saltgrain-backup-vrla", displayName: "Saltgrain Bakery — freezer backup (12 V VRLA block)",
			typeName: "generic-vrla-2v-cell", series: 6, parallel: 4,
			labels:         map[string]string{"fleet": orgBakery, "kind": "backup", "demo": "true"},
			capacityFactor: 0.94, resistanceFactor: 1.1, initialSOC: 0.97,
			newUsage: func(rng *rand.Rand) usage {
				return &backup{loadWatts: 90, chance: 0.35, rng: rng}
			},
		},
		spec{
			id: "saltgrain-backup-lfp", displayName: "Saltgrain Bakery — till and lights backup (12.8 V LFP)",
			typeName: "generic-lfp-26650", series: 4, parallel: 8,
			labels:         map[string]string{"fleet": orgBakery, "kind": "backup", "demo": "true"},
			capacityFactor: 0.98, resistanceFactor: 1.05, initialSOC: 0.9,
			newUsage: func(rng *rand.Rand) usage {
				return &backup{loadWatts: 140, chance: 0.35, rng: rng}
			},
		},
		spec{
			id: "cobblefield-gnss-rover", displayName: "Cobblefield Survey — GNSS rover (4 × AA NiMH)",
			typeName: "generic-nimh-aa", series: 4, parallel: 1,
			labels:         map[string]string{"fleet": orgSurvey, "kind": "handheld", "demo": "true"},
			capacityFactor: 0.95, resistanceFactor: 1.1, initialSOC: 0.95,
			newUsage: func(rng *rand.Rand) usage {
				return &handheld{baseAmps: 0.2, burstAmps: 0.3, rng: rng}
			},
		},
		spec{
			id: "cobblefield-laser-level", displayName: "Cobblefield Survey — laser level (4 × AA NiMH)",
			typeName: "generic-nimh-aa", series: 4, parallel: 1,
			labels:         map[string]string{"fleet": orgSurvey, "kind": "handheld", "demo": "true"},
			capacityFactor: 0.9, resistanceFactor: 1.2, initialSOC: 0.8,
			newUsage: func(rng *rand.Rand) usage {
				return &handheld{baseAmps: 0.15, burstAmps: 0.1, rng: rng}
			},
		},
	)
	return out
}

// unit is one battery being replayed: the true pack, its state, and its usage.
type unit struct {
	spec  spec
	circ  sim.Circuit
	truth cell.State
	use   usage
	rng   *rand.Rand // sensor noise (the usage has its own stream)
	t     float64    // time of the last generated sample, s since the replay's epoch
	// The epoch's day of the week (0 Monday … 6 Sunday) and time of day, s, in UTC.
	weekday0      int
	sinceMidnight float64
}

// newUnit builds the replay of s. Its random streams depend only on seed and the
// battery's position, so a replay is repeatable: a restarted demo regenerates the
// same history and skips what the server already has.
func newUnit(s spec, index int, seed uint64, epoch time.Time) (*unit, error) {
	epoch = epoch.UTC()
	typ, err := chem.Lookup(s.typeName)
	if err != nil {
		return nil, fmt.Errorf("demo: battery %s: %w", s.id, err)
	}
	pack := cell.Pack{Type: typ, Series: s.series, Parallel: s.parallel, CapacityFactor: s.capacityFactor, ResistanceFactor: s.resistanceFactor}
	if err := pack.Validate(); err != nil {
		return nil, fmt.Errorf("demo: battery %s: %w", s.id, err)
	}
	k := uint64(index)
	return &unit{
		spec:          s,
		circ:          sim.Circuit{Pack: pack, Kelvin: cell.Kelvin(25)},
		truth:         cell.State{SOC: s.initialSOC},
		use:           s.newUsage(rand.New(rand.NewPCG(seed, 2*k+1))),
		rng:           rand.New(rand.NewPCG(seed, 2*k+2)),
		weekday0:      (int(epoch.Weekday()) + 6) % 7,
		sinceMidnight: float64(epoch.Hour()*3600+epoch.Minute()*60+epoch.Second()) + float64(epoch.Nanosecond())/1e9,
	}, nil
}

// sample is one generated telemetry sample.
type sample struct {
	t       float64 // s since the epoch
	amps    float64 // pack current, positive = discharge
	volts   float64 // pack terminal voltage
	celsius float64
}

// step advances the true pack by dt seconds and returns the sample a battery
// management system would log at its end: the mean current over the step and the
// terminal voltage, each with a little sensor noise and quantisation.
func (u *unit) step(dt float64) sample {
	amps, celsius := u.use.current(u, u.t, dt)
	u.circ.Kelvin = cell.Kelvin(celsius)
	i, err := u.circ.Advance(&u.truth, sim.Current, amps, dt)
	if err != nil { // a constant current never fails; keep the pack at rest if it does
		i = 0
	}
	u.t += dt
	v := u.circ.Pack.Voltage(&u.truth, i, u.circ.Kelvin)
	// Sensor noise (invented): 2 mV per cell plus 10 mA, 0.3 % gain on current.
	nv := v + u.rng.NormFloat64()*0.002*float64(u.spec.series)
	ni := i*(1+0.003*u.rng.NormFloat64()) + 0.01*u.rng.NormFloat64()
	return sample{
		t:       u.t,
		amps:    math.Round(ni*100) / 100,
		volts:   math.Round(nv*1000) / 1000,
		celsius: math.Round((celsius+0.2*u.rng.NormFloat64())*10) / 10,
	}
}

// packVolts is the terminal voltage the pack would show at current i now.
func (u *unit) packVolts(i float64) float64 {
	return u.circ.Pack.Voltage(&u.truth, i, u.circ.Kelvin)
}

// cutoffVolts is the pack's end-of-discharge voltage.
func (u *unit) cutoffVolts() float64 {
	return u.circ.Pack.Type.Limits.CutoffVolts * float64(u.spec.series)
}

// ratedAmps converts a C-rate to pack amperes.
func (u *unit) ratedAmps(c float64) float64 { return c * u.circ.Pack.RatedCapacityAh() }

// constantVoltage returns the charge current (negative) a charger limited to maxAmps
// and to a pack voltage of cvVolts draws now, and whether the current has tapered
// below termAmps (the charge is complete).
func (u *unit) constantVoltage(maxAmps, cvVolts, termAmps float64) (amps float64, done bool) {
	if u.truth.SOC >= 0.995 {
		// The generic OCV tables end below some chargers' set points; stand in for
		// the battery management's full-charge stop.
		return 0, true
	}
	e, r := u.circ.Thevenin(&u.truth, true)
	i := (e - cvVolts) / r // the current that puts the terminal exactly on cvVolts
	i = math.Max(i, -maxAmps)
	if i >= 0 {
		return 0, true
	}
	return i, -i < termAmps
}

// clock splits t (s since the epoch) into a day number, the day of the week (0 Monday
// … 6 Sunday) and the hour of the day, in UTC.
func (u *unit) clock(t float64) (n, weekday int, hour float64) {
	t += u.sinceMidnight
	n = int(t / 86400)
	return n, (n + u.weekday0) % 7, (t - float64(n)*86400) / 3600
}

// ambient is a daily temperature swing: mean ± swing, warmest at 15:00.
func ambient(hour, mean, swing float64) float64 {
	return mean + swing*math.Cos(2*math.Pi*(hour-15)/24)
}

// cargoBike is a courier's cargo e-bike: two shifts of stop-and-go riding on
// weekdays, a short Saturday shift, a CC-CV charge in the evening, and for some bikes
// a top-up at the depot over lunch.
type cargoBike struct {
	intensity float64 // scales the rider's mean current
	topUp     bool
	rng       *rand.Rand

	mode      int     // bikeParked, bikeRiding, bikeStopped, bikeCharging
	until     float64 // end of the current ride or stop segment
	amps      float64 // base current of the current ride segment
	hill      float64 // end of a climb
	chargedOn int     // day of the last completed evening charge, +1 (0: none)
	plugIn    float64 // hour the bike is plugged in this evening
	plugDay   int     // day plugIn was drawn for, +1
	spent     int     // day the rider gave up for lack of charge, +1
}

const (
	bikeParked = iota
	bikeRiding
	bikeStopped
	bikeCharging
)

func (b *cargoBike) current(u *unit, t, dt float64) (float64, float64) {
	d, weekday, h := u.clock(t)
	celsius := ambient(h, 13, 5)
	inShift := false
	switch {
	case weekday < 5:
		inShift = (h >= 8 && h < 11.5) || (h >= 13 && h < 16.5)
	case weekday == 5:
		inShift = h >= 9 && h < 12
	}
	if b.plugDay != d+1 {
		b.plugDay, b.plugIn = d+1, 18+1.5*b.rng.Float64()
	}
	const standby = 0.02 // BMS and display, A (invented)
	switch {
	case inShift && b.spent != d+1:
		if b.mode != bikeRiding && b.mode != bikeStopped {
			b.mode, b.until = bikeStopped, t
		}
		if t >= b.until { // next segment: ride 2–6 min, then stop 3–9 min
			if b.mode == bikeStopped {
				b.mode, b.until = bikeRiding, t+120+240*b.rng.Float64()
				b.amps = b.intensity * (1.2 + 2.6*b.rng.Float64())
			} else {
				b.mode, b.until = bikeStopped, t+180+360*b.rng.Float64()
			}
		}
		if b.mode == bikeStopped {
			return 0.15, celsius // lights and display at a drop-off
		}
		if t >= b.hill && b.rng.Float64() < 0.04 {
			b.hill = t + 20 + 30*b.rng.Float64()
		}
		i := b.amps + 0.8*b.rng.NormFloat64()
		if t < b.hill {
			i += 5 // a climb with a full load
		}
		i = math.Min(math.Max(i, 0.3), 20)
		// The rider heads home rather than run the pack flat (deep discharge harms
		// lithium cells; the controller's cut-off is a last resort).
		if u.truth.SOC < 0.15 || u.packVolts(i) < u.cutoffVolts()+1.5 {
			b.spent, b.mode = d+1, bikeParked
			return standby, celsius
		}
		return i, celsius
	case b.topUp && weekday < 5 && h >= 12 && h < 13 && u.truth.SOC < 0.9:
		b.mode = bikeCharging
		i, _ := u.constantVoltage(3, 4.2*float64(u.spec.series), u.ratedAmps(0.05))
		return i, 20 // indoors at the depot
	case h >= b.plugIn && b.chargedOn != d+1:
		b.mode = bikeCharging
		i, done := u.constantVoltage(4, 4.2*float64(u.spec.series), u.ratedAmps(0.05))
		if done {
			b.chargedOn, b.mode = d+1, bikeParked
			return standby, 18
		}
		return i, 18
	}
	b.mode = bikeParked
	if h >= 17.5 || h < 7 {
		celsius = 16 // in the depot overnight
	}
	return standby, celsius
}

// backup is a standby battery on a charger in a warm bakery: bulk/absorption/float
// for lead-acid, CC-CV with a lowered voltage and a nightly top-up for LFP. Now and
// then the mains fails and the battery carries its load (constant power) until the
// mains returns or the inverter disconnects at the cut-off voltage.
type backup struct {
	loadWatts float64 // the load during an outage
	chance    float64 // probability of an outage on a given day
	rng       *rand.Rand

	outDay       int     // day the outage was drawn for, +1
	outStart     float64 // hour of the day's outage; negative: none
	outEnd       float64
	disconnected bool // the inverter cut off during the outage
	charging     bool // lead-acid: in bulk/absorption; LFP: charging
}

func (b *backup) current(u *unit, t, dt float64) (float64, float64) {
	d, weekday, h := u.clock(t)
	celsius := ambient(h, 27, 2) // next to the ovens
	if b.outDay != d+1 {
		b.outDay, b.outStart = d+1, -1
		if b.rng.Float64() < b.chance {
			b.outStart = 24 * b.rng.Float64()
			b.outEnd = b.outStart + 0.25 + 1.75*b.rng.Float64()
		}
		if weekday == 0 { // weekly self-test, Monday 03:00 for 10 minutes
			b.outStart, b.outEnd = 3, 3+1.0/6
		}
	}
	if b.outStart >= 0 && h >= b.outStart && h < b.outEnd {
		b.charging = true // recharge once the mains is back
		if b.disconnected {
			return 0, celsius
		}
		w := b.loadWatts * (1 + 0.1*b.rng.NormFloat64())
		e, r := u.circ.Thevenin(&u.truth, false)
		i, err := sim.Draw(sim.Power, w, e, r)
		if err != nil || e-r*i < u.cutoffVolts() || u.truth.SOC < 0.05 {
			b.disconnected = true
			return 0, celsius
		}
		return i, celsius
	}
	b.disconnected = false
	lim := u.circ.Pack.Type.Limits
	s := float64(u.spec.series)
	if u.circ.Pack.Type.ChargeMethod == cell.ChargeThreeStage {
		// Temperature-compensated absorption and float voltages (common practice).
		comp := lim.TempCompVoltsPerK * (celsius - 25)
		if b.charging {
			i, done := u.constantVoltage(u.ratedAmps(lim.StandardChargeRate), s*(lim.ChargeVolts+comp), u.ratedAmps(lim.TerminationRate))
			if !done {
				return i, celsius
			}
			b.charging = false
		}
		if u.truth.SOC >= 0.999 {
			// The model has no gassing current: a full battery on float draws nothing.
			return 0, celsius
		}
		i, _ := u.constantVoltage(u.ratedAmps(lim.StandardChargeRate), s*(lim.FloatVolts+comp), 0)
		return i, celsius
	}
	// LFP: a gentle standby charge to 3.45 V per cell, topped up every night at 02:00.
	if h >= 2 && h < 2+dt/3600 {
		b.charging = true
	}
	if b.charging {
		i, done := u.constantVoltage(u.ratedAmps(0.2), 3.45*s, u.ratedAmps(0.05))
		if !done {
			return i, celsius
		}
		b.charging = false
	}
	return 0.03, celsius // the monitoring board
}

// handheld is a surveyor's instrument on AA NiMH cells: used in the field Monday to
// Thursday, with a radio or laser burst every minute, charged at the office in the
// evening at C/2 until full (the charger's −ΔV stop, which the model cannot show, is
// stood in for by the model's full state of charge), with a backup timer.
type handheld struct {
	baseAmps  float64
	burstAmps float64
	rng       *rand.Rand

	off         int     // day the instrument shut down on low charge, +1
	chargeDay   int     // day of the last finished charge, +1
	chargeStart int     // day of the last started charge, +1
	chargeFrom  float64 // when that charge started, s since the epoch
}

func (hh *handheld) current(u *unit, t, dt float64) (float64, float64) {
	d, weekday, h := u.clock(t)
	field := weekday < 4 && ((h >= 8.5 && h < 12) || (h >= 13 && h < 15))
	if field && hh.off != d+1 {
		celsius := ambient(h, 12, 6)
		i := hh.baseAmps * (1 + 0.05*hh.rng.NormFloat64())
		if math.Mod(t, 60) < 15 {
			i += hh.burstAmps
		}
		// The instrument switches itself off on low voltage; its gauge also stops
		// it short of empty.
		if u.packVolts(i) < u.cutoffVolts() || u.truth.SOC < 0.05 {
			hh.off = d + 1
			return 0, celsius
		}
		return i, celsius
	}
	const office = 21.0
	if weekday < 4 && h >= 17 && hh.chargeDay != d+1 {
		lim := u.circ.Pack.Type.Limits
		if hh.chargeStart != d+1 {
			hh.chargeStart, hh.chargeFrom = d+1, t
		}
		timer := lim.TimerFactor * 3600 / 0.5 // the backup timer at C/2
		if u.truth.SOC >= 0.99 || t-hh.chargeFrom >= timer {
			hh.chargeDay = d + 1
			return 0, office
		}
		return -u.ratedAmps(0.5), office
	}
	return 0, office
}
