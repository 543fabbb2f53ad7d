package ageing

import (
	"errors"
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

// sqrtHistory returns cycles 1..n with capacity q0 − b·√cycle plus Gaussian noise of
// standard deviation sigma from a fixed seed: a square-root fade law with a known end of
// life (q0 − b·√n* = 0.8·q0 gives n* = (0.2·q0/b)²).
func sqrtHistory(n int, q0, b, sigma float64, seed uint64) (cycles, q []float64) {
	rng := rand.New(rand.NewPCG(seed, 1))
	for k := 1; k <= n; k++ {
		cycles = append(cycles, float64(k))
		q = append(q, q0-b*math.Sqrt(float64(k))+sigma*rng.NormFloat64())
	}
	return cycles, q
}

// TestProjectRecoversLaw checks that the projection recovers the end of life of a known
// fade law from its first third (the analytic crossing is the oracle).
func TestProjectRecoversLaw(t *testing.T) {
	// 3.0 − 0.02·√n reaches 2.4 Ah (80 % of 3.0 Ah) at n* = (0.6/0.02)² = 900.
	cycles, q := sqrtHistory(300, 3.0, 0.02, 0.003, 7)
	const want = 900.0
	tests := []struct {
		name string
		set  *Settings
		tol  float64 // relative
	}{
		{"defaults", nil, 0.05},
		{"sqrt only", &Settings{Models: []Model{SquareRoot}}, 0.02},
		{"bic", &Settings{Criterion: BIC}, 0.05},
		{"forward", &Settings{Criterion: Forward}, 0.05},
		{"least squares", &Settings{LeastSquares: true, OutlierWindow: -1}, 0.05},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r, err := Project(Problem{Cycles: cycles, Capacity: q, ReferenceAh: 3.0}, tc.set)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(r.Cycles.Value-want) > tc.tol*want {
				t.Errorf("Project: end of life at %.1f (%s); want %g ± %g %%", r.Cycles.Value, r.Model, want, 100*tc.tol)
			}
			if tc.set == nil && !(r.Cycles.Low <= want && want <= r.Cycles.High) {
				// The envelope over laws is wide; a single law's 95 % interval may miss on
				// one draw, which TestProjectIntervalCoverage checks statistically.
				t.Errorf("interval [%.1f, %.1f] does not hold the true %g", r.Cycles.Low, r.Cycles.High, want)
			}
			if !(r.Parameter.Low >= r.Cycles.Low && r.Parameter.High <= r.Cycles.High) {
				t.Errorf("chosen-law interval %+v is not inside the envelope %+v", r.Parameter, r.Cycles)
			}
			if math.Abs(r.Threshold-2.4) > 1e-12 || r.Reference != 3.0 {
				t.Errorf("threshold %g, reference %g; want 2.4, 3.0", r.Threshold, r.Reference)
			}
			if math.Abs(r.Sigma-0.003) > 0.001 {
				t.Errorf("Sigma = %g; want about the true noise 0.003", r.Sigma)
			}
		})
	}
}

// TestProjectIntervalCoverage checks the chosen law's interval statistically: over many
// noisy draws of a known square-root law, a 95 % interval must hold the true crossing in
// about 95 % of draws. With 300 draws the binomial standard deviation is 1.3 %, so
// [90 %, 99.5 %] fails only for a real miscalibration; the inflation for residual
// autocorrelation may make it slightly conservative on white noise.
func TestProjectIntervalCoverage(t *testing.T) {
	const draws = 300
	for _, indep := range []bool{false, true} {
		hit := 0
		for seed := range uint64(draws) {
			cycles, q := sqrtHistory(100, 3.0, 0.06, 0.01, 1000+seed)
			// 3.0 − 0.06·√n = 2.4 at n = 100; fitted on the first 40 cycles.
			r, err := Project(Problem{Cycles: cycles[:40], Capacity: q[:40], ReferenceAh: 3.0},
				&Settings{Models: []Model{SquareRoot}, ParameterInterval: true, IndependentResiduals: indep})
			if err != nil {
				t.Fatal(err)
			}
			if r.Cycles.Low <= 100 && 100 <= r.Cycles.High {
				hit++
			}
		}
		cov := float64(hit) / draws
		t.Logf("IndependentResiduals=%v: coverage %.3f", indep, cov)
		if cov < 0.90 || cov > 0.995 {
			t.Errorf("IndependentResiduals=%v: 95 %% interval covered the truth in %.1f %% of %d draws; want 90–99.5 %%", indep, 100*cov, draws)
		}
	}
}

// TestProjectExactLine checks a noise-free line, whose crossing is exact arithmetic:
// 2.0 − 0.001·n reaches 1.6 Ah (80 % of 2.0 Ah) at n = 400.
func TestProjectExactLine(t *testing.T) {
	var cycles, q []float64
	for k := 0; k <= 100; k++ {
		cycles = append(cycles, float64(10*k))
		q = append(q, 2.0-0.001*float64(10*k))
	}
	r, err := Project(Problem{Cycles: cycles, Capacity: q}, &Settings{Models: []Model{Linear}})
	if err != nil {
		t.Fatal(err)
	}
	// Reference from the initial points: the median of 2.0, 1.99, …, 1.96 is 1.98, so
	// the threshold is 1.584 Ah and the crossing (2.0 − 1.584)/0.001 = 416.
	if math.Abs(r.Reference-1.98) > 1e-12 {
		t.Errorf("Reference = %g; want 1.98", r.Reference)
	}
	for _, v := range []float64{r.Cycles.Value, r.Cycles.Low, r.Cycles.High} {
		if math.Abs(v-416) > 1e-6 {
			t.Errorf("crossing %+v; want 416 exactly", r.Cycles)
			break
		}
	}
	if got := r.Capacity(1000); math.Abs(got-1.0) > 1e-12 {
		t.Errorf("Capacity(1000) = %g; want 1.0", got)
	}
}

// TestProjectRobust checks that dropouts and spikes, as in measured capacity histories
// (interrupted discharges, regeneration after rests), barely move the projection.
func TestProjectRobust(t *testing.T) {
	cycles, clean := sqrtHistory(300, 3.0, 0.02, 0.003, 11)
	ref, err := Project(Problem{Cycles: cycles, Capacity: clean, ReferenceAh: 3.0}, &Settings{Models: []Model{SquareRoot}})
	if err != nil {
		t.Fatal(err)
	}
	dirty := append([]float64(nil), clean...)
	rng := rand.New(rand.NewPCG(3, 4))
	bad := 0
	for i := range dirty {
		switch u := rng.Float64(); {
		case u < 0.05: // interrupted discharge: a fraction of the capacity
			dirty[i] *= 0.1 + 0.8*rng.Float64()
			bad++
		case u < 0.08: // zero reading
			dirty[i] = 0
			bad++
		case u < 0.10: // spike
			dirty[i] += 0.1
			bad++
		}
	}
	// Regeneration: a jump of 40 mAh decaying over 5 cycles after "rests".
	for _, at := range []int{60, 140, 220} {
		for k := range 5 {
			dirty[at+k] += 0.04 * math.Exp(-float64(k))
		}
	}
	got, err := Project(Problem{Cycles: cycles, Capacity: dirty, ReferenceAh: 3.0}, &Settings{Models: []Model{SquareRoot}})
	if err != nil {
		t.Fatal(err)
	}
	if d := math.Abs(got.Cycles.Value-ref.Cycles.Value) / ref.Cycles.Value; d > 0.03 {
		t.Errorf("with %d bad points the end of life moved from %.1f to %.1f (%.1f %%); want ≤ 3 %%", bad, ref.Cycles.Value, got.Cycles.Value, 100*d)
	}
	if got.Outliers < bad*3/4 {
		t.Errorf("Outliers = %d; want most of the %d bad points rejected", got.Outliers, bad)
	}
	ls, err := Project(Problem{Cycles: cycles, Capacity: dirty, ReferenceAh: 3.0}, &Settings{Models: []Model{SquareRoot}, LeastSquares: true, OutlierWindow: -1})
	if err != nil {
		t.Fatal(err)
	}
	// Plain least squares is pulled far off by the same points, which is why the
	// robust fit is the default.
	if d := math.Abs(ls.Cycles.Value-ref.Cycles.Value) / ref.Cycles.Value; d < 0.1 {
		t.Logf("note: least squares moved only %.1f %% on this draw", 100*d)
	}
}

func TestProjectDays(t *testing.T) {
	cycles, q := sqrtHistory(200, 3.0, 0.02, 0.002, 5)
	days := make([]float64, len(cycles))
	for i, c := range cycles {
		days[i] = 0.5 * c // two cycles a day
	}
	r, err := Project(Problem{Cycles: cycles, Capacity: q, Days: days, ReferenceAh: 3.0}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if r.Days == nil {
		t.Fatal("Days = nil; want a projection")
	}
	if math.Abs(r.Days.Value-0.5*r.Cycles.Value) > 1e-6 || math.Abs(r.Days.Low-0.5*r.Cycles.Low) > 1e-6 {
		t.Errorf("Days = %+v; want half of Cycles %+v", *r.Days, r.Cycles)
	}
	r2, err := Project(Problem{Cycles: cycles, Capacity: q, Days: make([]float64, len(cycles)), ReferenceAh: 3.0}, nil)
	if err != nil || r2.Days != nil || !math.IsNaN(r2.Day(10)) {
		t.Errorf("time that does not advance: Days = %v, err %v; want nil", r2.Days, err)
	}
}

func TestProjectNoEndOfLife(t *testing.T) {
	// A rising history (early capacity gain) never reaches end of life.
	var cycles, q []float64
	for k := 1; k <= 50; k++ {
		cycles = append(cycles, float64(k))
		q = append(q, 2.0+0.001*float64(k)+0.0005*math.Sin(float64(k)))
	}
	r, err := Project(Problem{Cycles: cycles, Capacity: q}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(r.Cycles.Value, 1) || !math.IsInf(r.Cycles.High, 1) {
		t.Errorf("Cycles = %+v; want +Inf value and upper bound", r.Cycles)
	}
	// A perfectly flat history: zero residuals, zero MAD, no crossing, and no failure.
	flat := make([]float64, len(cycles))
	for i := range flat {
		flat[i] = 1.5
	}
	r, err = Project(Problem{Cycles: cycles, Capacity: flat}, nil)
	if err != nil {
		t.Fatalf("flat history: %v", err)
	}
	if !math.IsInf(r.Cycles.Value, 1) || !math.IsInf(r.Cycles.Low, 1) {
		t.Errorf("flat history: Cycles = %+v; want no crossing", r.Cycles)
	}
}

func TestProjectBadInput(t *testing.T) {
	good := func() Problem {
		c, q := sqrtHistory(20, 3, 0.02, 0.001, 1)
		return Problem{Cycles: c, Capacity: q}
	}
	tests := []struct {
		name  string
		edit  func(p *Problem, s *Settings)
		field string
	}{
		{"nan capacity", func(p *Problem, _ *Settings) { p.Capacity[3] = math.NaN() }, "capacity_amp_hours"},
		{"negative capacity", func(p *Problem, _ *Settings) { p.Capacity[3] = -1 }, "capacity_amp_hours"},
		{"huge capacity", func(p *Problem, _ *Settings) { p.Capacity[3] = 1e300 }, "capacity_amp_hours"},
		{"inf cycle", func(p *Problem, _ *Settings) { p.Cycles[19] = math.Inf(1) }, "cycles"},
		{"cycle repeats", func(p *Problem, _ *Settings) { p.Cycles[5] = p.Cycles[4] }, "cycles"},
		{"cycle backwards", func(p *Problem, _ *Settings) { p.Cycles[5] = 1 }, "cycles"},
		{"negative cycle", func(p *Problem, _ *Settings) { p.Cycles[0] = -1 }, "cycles"},
		{"length mismatch", func(p *Problem, _ *Settings) { p.Capacity = p.Capacity[:10] }, "capacity_amp_hours"},
		{"days mismatch", func(p *Problem, _ *Settings) { p.Days = []float64{1} }, "days"},
		{"days backwards", func(p *Problem, _ *Settings) {
			p.Days = make([]float64, len(p.Cycles))
			p.Days[3] = 5
		}, "days"},
		{"too few", func(p *Problem, _ *Settings) { p.Cycles, p.Capacity = p.Cycles[:4], p.Capacity[:4] }, "capacity_amp_hours"},
		{"fraction 1", func(_ *Problem, s *Settings) { s.EndOfLife = 1 }, "end_of_life_fraction"},
		{"fraction negative", func(_ *Problem, s *Settings) { s.EndOfLife = -0.2 }, "end_of_life_fraction"},
		{"fraction nan", func(_ *Problem, s *Settings) { s.EndOfLife = math.NaN() }, "end_of_life_fraction"},
		{"level", func(_ *Problem, s *Settings) { s.Level = 1.5 }, "level"},
		{"reference nan", func(p *Problem, _ *Settings) { p.ReferenceAh = math.NaN() }, "reference_capacity_amp_hours"},
		{"unknown model", func(_ *Problem, s *Settings) { s.Models = []Model{"cubic"} }, "models"},
		{"no models", func(_ *Problem, s *Settings) { s.Models = []Model{} }, "models"},
		{"horizon before data", func(_ *Problem, s *Settings) { s.Horizon = 0.5 }, "horizon"},
		{"initial capacity zero", func(p *Problem, _ *Settings) {
			for i := range 8 {
				p.Capacity[i] = 0
			}
		}, "capacity_amp_hours"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			p, s := good(), Settings{}
			tc.edit(&p, &s)
			_, err := Project(p, &s)
			var fe *cell.FieldError
			if !errors.As(err, &fe) || !errors.Is(err, cell.ErrInvalid) {
				t.Fatalf("Project: err = %v; want a *cell.FieldError", err)
			}
			if fe.Field != tc.field {
				t.Errorf("error field = %q (%v); want %q", fe.Field, err, tc.field)
			}
		})
	}
	p := good()
	p.Cycles, p.Capacity = p.Cycles[:3], p.Capacity[:3]
	if _, err := Project(p, nil); !errors.Is(err, ErrTooFew) {
		t.Errorf("three points: err = %v; want ErrTooFew", err)
	}
}

// TestProjectNASAFullHistory fits the whole measured history of NASA cell B0005 (Saha and
// Goebel 2007, NASA Ames Prognostics Data Repository, public domain), whose PROVENANCE.md
// states that it falls below 80 % of its first capacity (1.856 Ah) at discharge 101. A
// trend through the whole history (an interpolation, not a projection) must cross near
// there; regeneration bumps around the crossing make ±8 discharges a fair tolerance.
func TestProjectNASAFullHistory(t *testing.T) {
	path := filepath.Join(datasetsDir(t), "nasa_pcoe_capacity", "capacity_per_discharge.csv")
	c := readColumns(t, path, func(r map[string]string) bool { return r["cell_id"] == "B0005" }, "discharge_index", "capacity_ah")
	if len(c[0]) != 168 {
		t.Fatalf("B0005 has %d discharges; PROVENANCE.md says 168", len(c[0]))
	}
	r, err := Project(Problem{Cycles: c[0], Capacity: c[1], ReferenceAh: 1.85649}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("B0005 full history: %s, crossing %.1f [%.1f, %.1f]", r.Model, r.Cycles.Value, r.Cycles.Low, r.Cycles.High)
	if math.Abs(r.Cycles.Value-101) > 8 {
		t.Errorf("B0005 trend crosses 80 %% at %.1f; PROVENANCE.md: discharge 101", r.Cycles.Value)
	}
}

// TestProjectSamsungFullHistory fits the whole history of Samsung 30Q cell C (ARTS
// Laboratory, University of South Carolina, CC BY-SA 4.0), whose PROVENANCE.md says it is
// "below 80 % from about cycle 480" (of its first capacity, 2.94 Ah). Incomplete
// discharges are dropped as PROVENANCE.md advises (end voltage within 2.4–2.6 V).
func TestProjectSamsungFullHistory(t *testing.T) {
	path := filepath.Join(datasetsDir(t), "samsung30q_cycling", "per_cycle_summary.csv")
	c := readColumns(t, path, func(r map[string]string) bool { return r["cell_id"] == "C" }, "cycle", "dis_ah", "dis_v_end_v")
	var cycles, q []float64
	for i := range c[0] {
		if v := c[2][i]; v >= 2.4 && v <= 2.6 {
			cycles = append(cycles, c[0][i])
			q = append(q, c[1][i])
		}
	}
	r, err := Project(Problem{Cycles: cycles, Capacity: q, ReferenceAh: 2.94}, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("Samsung C full history: %s, crossing %.1f [%.1f, %.1f]", r.Model, r.Cycles.Value, r.Cycles.Low, r.Cycles.High)
	if math.Abs(r.Cycles.Value-480) > 25 {
		t.Errorf("cell C trend crosses 80 %% at %.1f; PROVENANCE.md: about cycle 480", r.Cycles.Value)
	}
}
