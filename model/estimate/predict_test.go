package estimate

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/voltcast/voltcast/model/cell"
)

// TestPredictionMatchesStep holds the filter's prediction to cell.Pack.Step, the
// simulator's discretisation: for random states, currents (both signs), step lengths
// from 10 ms to 10 h, temperatures, pack shapes, health factors and with and without
// hysteresis, and with ohmic and charge-transfer branches, the predicted mean must
// equal Step's result exactly, and the Jacobian and input column must match central
// finite differences of Step.
func TestPredictionMatchesStep(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	for trial := range 400 {
		f, pack := randomFilter(t, rng, trial, 4)
		l := f.l
		health := l.ic >= 0
		sg := segment{
			i:  float64(pack.Parallel) * (6*rng.Float64() - 2),
			dt: math.Pow(10, -2+6.5*rng.Float64()),
			tk: cell.Kelvin(-10 + 50*rng.Float64()),
		}
		x0 := f.x
		pk, cs := f.model()
		pk.Step(&cs, sg.i, sg.dt, sg.tk)
		f.predict(sg)
		want := vec{cs.SOC}
		for k := range l.nb {
			want[1+k] = cs.V[k]
		}
		if l.ih >= 0 {
			want[l.ih] = cs.H
		}
		if health {
			want[l.ic], want[l.ir] = x0[l.ic], x0[l.ir]
		}
		for i := range l.n {
			if f.x[i] != want[i] {
				t.Fatalf("trial %d state %d: prediction %.17g; Step gives %.17g", trial, i, f.x[i], want[i])
			}
		}

		// Jacobian and input column against central differences of the prediction
		// (which equals Step, as checked above).
		f.x = x0
		var a trans
		var b vec
		f.transition(sg, &a, &b)
		for j := range l.n + 1 {
			hstep := 1e-6
			if j == 0 {
				hstep = 1e-7
			}
			var xp, xm vec
			for _, d := range []float64{1, -1} {
				g := *f
				g.x = x0
				s := sg
				if j < l.n {
					g.x[j] += d * hstep
				} else {
					hstep = 1e-5
					s.i += d * hstep
				}
				var ta trans
				var tb vec
				xn, _ := g.transition(s, &ta, &tb)
				if d > 0 {
					xp = xn
				} else {
					xm = xn
				}
			}
			for i := range l.n {
				fd := (xp[i] - xm[i]) / (2 * hstep)
				an := b[i]
				if j < l.n {
					an = a.at(i, j)
				}
				if math.Abs(fd-an) > 1e-6*(1+math.Abs(fd)) {
					t.Errorf("trial %d: ∂x%d/∂x%d = %.9g; central difference %.9g", trial, i, j, an, fd)
				}
			}
		}
	}
}

// TestMeasurementMatchesVoltage holds the filter's modelled voltage to
// cell.Pack.Voltage and its measurement row H to central differences of it.
func TestMeasurementMatchesVoltage(t *testing.T) {
	rng := rand.New(rand.NewPCG(15, 16))
	for trial := range 200 {
		f, pack := randomFilter(t, rng, trial, 12)
		l := f.l
		i := float64(pack.Parallel) * (6*rng.Float64() - 2)
		tk := cell.Kelvin(-10 + 50*rng.Float64())
		y, h, _ := f.measurement(&f.x, i, tk, false, 1)
		pk, cs := f.model()
		if want := pk.Voltage(&cs, i, tk); y != want {
			t.Fatalf("trial %d: modelled voltage %.17g; Pack.Voltage %.17g", trial, y, want)
		}
		x0 := f.x
		for j := range l.n {
			const hs = 1e-7
			f.x = x0
			f.x[j] += hs
			yp, _, _ := f.measurement(&f.x, i, tk, false, 1)
			f.x = x0
			f.x[j] -= hs
			ym, _, _ := f.measurement(&f.x, i, tk, false, 1)
			fd := (yp - ym) / (2 * hs)
			if math.Abs(fd-h[j]) > 1e-5*(1+math.Abs(fd)) {
				t.Errorf("trial %d: ∂y/∂x%d = %.9g; central difference %.9g", trial, j, h[j], fd)
			}
		}
		f.x = x0
	}
}

// randomFilter returns a filter for a variant of the test type chosen by trial (with or
// without hysteresis, a charge-transfer first branch and health states; a random pack
// shape up to maxSeries in series) whose state is set to random values in range.
func randomFilter(t *testing.T, rng *rand.Rand, trial, maxSeries int) (*EKF, cell.Pack) {
	t.Helper()
	ty := *testType(t)
	if trial%2 == 1 {
		ty.Hysteresis = cell.Hysteresis{Max: 0.02, Gamma: 5}
	}
	if trial%3 == 0 {
		// A charge-transfer (Butler–Volmer) first branch, its exchange current
		// tabulated over SOC so that ∂u/∂z matters.
		br := append([]cell.Branch(nil), ty.Branches...)
		i0 := cell.Param{Table: mustSurface(t, []float64{0, 0.5, 1}, []float64{cell.Kelvin(25)}, [][]float64{{0.5, 1.5, 1.0}})}
		br[0].ExchangeCurrent = &i0
		ty.Branches = br
		if err := ty.Validate(); err != nil {
			t.Fatal(err)
		}
	}
	pack, err := cell.NewPack(&ty, 1+rng.IntN(maxSeries), 1+rng.IntN(3))
	if err != nil {
		t.Fatal(err)
	}
	health := trial%4 >= 2
	f, err := NewEKF(pack, 0.5, &Settings{Health: health})
	if err != nil {
		t.Fatal(err)
	}
	l := f.l
	f.x[0] = 0.02 + 0.96*rng.Float64()
	for k := range l.nb {
		f.x[1+k] = 0.05 * (rng.Float64() - 0.5)
	}
	if l.ih >= 0 {
		f.x[l.ih] = 0.02 * (2*rng.Float64() - 1)
	}
	if health {
		f.x[l.ic], f.x[l.ir] = 0.7+0.4*rng.Float64(), 0.8+1.5*rng.Float64()
	}
	return f, pack
}
