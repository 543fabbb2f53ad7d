package sim

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// Kind is the law a load segment follows.
type Kind uint8

// The load laws. The zero Kind is invalid.
const (
	Current    Kind = iota + 1 // constant current, A (positive = discharge)
	Power                      // constant pack terminal power, W (positive = discharge)
	Resistance                 // constant external resistance, Ω (always discharges)
)

var kindNames = [...]string{Current: "current", Power: "power", Resistance: "resistance"}

// String returns "current", "power" or "resistance".
func (k Kind) String() string {
	if k >= Current && k <= Resistance {
		return kindNames[k]
	}
	return fmt.Sprintf("Kind(%d)", uint8(k))
}

// Unit returns the SI unit symbol of a value of this kind.
func (k Kind) Unit() string {
	switch k {
	case Current:
		return "A"
	case Power:
		return "W"
	case Resistance:
		return "Ω"
	}
	return ""
}

// ParseKind parses the name of a load law: "current", "power" or "resistance".
func ParseKind(s string) (Kind, error) {
	for k := Current; k <= Resistance; k++ {
		if s == kindNames[k] {
			return k, nil
		}
	}
	return 0, fmt.Errorf("%w: unknown load kind %q (want current, power or resistance)", cell.ErrInvalid, s)
}

// MarshalText encodes the kind by name.
func (k Kind) MarshalText() ([]byte, error) {
	if k < Current || k > Resistance {
		return nil, fmt.Errorf("sim: cannot encode %v", k)
	}
	return []byte(kindNames[k]), nil
}

// UnmarshalText decodes a kind by name.
func (k *Kind) UnmarshalText(b []byte) error {
	v, err := ParseKind(string(b))
	if err != nil {
		return err
	}
	*k = v
	return nil
}

// Bounds of what a load may ask for. They exist to reject typing errors and absurd
// requests before they cost time, not to judge what a pack can do.
const (
	MaxSegments = 10000 // segments in one load
	MinDuration = 1e-3  // s, shortest segment
	MaxDuration = 1e9   // s, longest finite segment (about 32 years)
	MaxAmps     = 1e6   // A, largest |current|
	MaxWatts    = 1e9   // W, largest |power|
	MinOhms     = 1e-9  // Ω, smallest external resistance
	MaxOhms     = 1e12  // Ω, largest external resistance
)

// Segment is one demand held for a duration.
type Segment struct {
	// Duration is how long the demand lasts, in seconds: from MinDuration to
	// MaxDuration, or +Inf for the last segment of a load that does not repeat.
	Duration float64 `json:"duration_seconds"`
	// Kind is the law the demand follows.
	Kind Kind `json:"kind"`
	// Value is the current in A, the power in W (both positive for discharge, negative
	// for charge), or the external resistance in Ω (positive), according to Kind.
	Value float64 `json:"value"`
}

// Load is what a pack drives: its segments in order, optionally repeated for ever. The
// zero value is invalid (no segments).
type Load struct {
	Segments []Segment `json:"segments"`
	Repeat   bool      `json:"repeat,omitempty"` // start again after the last segment
}

// ConstantCurrent returns a load drawing amps (A, positive = discharge) for ever.
func ConstantCurrent(amps float64) Load { return constant(Current, amps) }

// ConstantPower returns a load drawing watts (W at the pack terminals, positive =
// discharge) for ever.
func ConstantPower(watts float64) Load { return constant(Power, watts) }

// ConstantResistance returns a load of ohms (Ω) across the pack terminals for ever.
func ConstantResistance(ohms float64) Load { return constant(Resistance, ohms) }

func constant(k Kind, v float64) Load {
	return Load{Segments: []Segment{{Duration: math.Inf(1), Kind: k, Value: v}}}
}

// Validate checks the load and returns the first problem as a [*cell.FieldError] whose
// field is a path below "load".
func (l *Load) Validate() error {
	n := len(l.Segments)
	if n == 0 {
		return cell.Invalid("load.segments", "a load needs at least one segment")
	}
	if n > MaxSegments {
		return cell.Invalid("load.segments", "at most %d segments, got %d", MaxSegments, n)
	}
	for k := range l.Segments {
		if err := l.Segments[k].validate(k, !l.Repeat && k == n-1); err != nil {
			return err
		}
	}
	return nil
}

func (sg *Segment) validate(k int, last bool) error {
	d := sg.Duration
	switch {
	case math.IsInf(d, 1) && last:
	case !cell.Finite(d):
		return cell.Invalid(segField(k, "duration_seconds"), "must be finite (only the last segment of a load that does not repeat may last for ever), got %g", d)
	case d < MinDuration || d > MaxDuration:
		return cell.Invalid(segField(k, "duration_seconds"), "must be from %g to %g s, got %g", MinDuration, MaxDuration, d)
	}
	v := sg.Value
	if !cell.Finite(v) {
		return cell.Invalid(segField(k, "value"), "must be finite, got %g", v)
	}
	switch sg.Kind {
	case Current:
		if math.Abs(v) > MaxAmps {
			return cell.Invalid(segField(k, "value"), "current %g A is beyond ±%g A", v, MaxAmps)
		}
	case Power:
		if math.Abs(v) > MaxWatts {
			return cell.Invalid(segField(k, "value"), "power %g W is beyond ±%g W", v, MaxWatts)
		}
	case Resistance:
		if v < MinOhms || v > MaxOhms {
			return cell.Invalid(segField(k, "value"), "resistance must be from %g to %g Ω, got %g", MinOhms, MaxOhms, v)
		}
	default:
		return cell.Invalid(segField(k, "kind"), "unknown load kind %d (want current, power or resistance)", sg.Kind)
	}
	return nil
}

func segField(k int, name string) string { return fmt.Sprintf("load.segments[%d].%s", k, name) }

// Duration returns the total duration of one pass through the segments in seconds
// (+Inf if the last one lasts for ever).
func (l *Load) Duration() float64 {
	var d float64
	for _, sg := range l.Segments {
		d += sg.Duration
	}
	return d
}

// Finite reports whether the load ends: it does not repeat and every segment is finite.
func (l *Load) Finite() bool { return !l.Repeat && !math.IsInf(l.Duration(), 1) }

// Cursor walks the segments of a load in time order. Make one with [Load.Cursor]; it
// reads the load's segments, which must not change while it is in use.
type Cursor struct {
	segs   []Segment
	repeat bool
	k      int     // index of the current segment
	start  float64 // absolute start time of segment k, s
	period float64 // one pass through the segments, s
	cycle  int     // completed passes
}

// Cursor returns a cursor at time 0, on the first segment. The load must be valid.
func (l *Load) Cursor() Cursor {
	return Cursor{segs: l.Segments, repeat: l.Repeat, period: l.Duration()}
}

// Segment returns the segment in force.
func (c *Cursor) Segment() Segment { return c.segs[c.k] }

// Index returns the index of the segment in force and the number of completed passes
// through the load.
func (c *Cursor) Index() (segment, cycle int) { return c.k, c.cycle }

// Start returns the time the segment in force began, in s.
func (c *Cursor) Start() float64 { return c.start }

// End returns the time the segment in force ends, in s (+Inf for a segment that lasts
// for ever).
func (c *Cursor) End() float64 { return c.start + c.segs[c.k].Duration }

// Next moves to the following segment and reports whether there is one: false once a
// load that does not repeat has run out, in which case the cursor stays on its last
// segment.
func (c *Cursor) Next() bool {
	if c.k+1 < len(c.segs) {
		c.start += c.segs[c.k].Duration
		c.k++
		return true
	}
	if !c.repeat {
		return false
	}
	c.cycle++
	c.k = 0
	// Start each pass from cycle·period so that rounding does not accumulate over
	// thousands of cycles.
	c.start = float64(c.cycle) * c.period
	return true
}
