package estimate

import (
	"fmt"
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// EKF is an extended Kalman filter for the state of charge of a pack (Plett 2004,
// Part 3; see the package documentation). Build it with [NewEKF]; the zero value is not
// usable. It owns all its scratch space: Update does not allocate. It is not safe for
// concurrent use.
type EKF struct {
	pack       cell.Pack // health factors of the pack are the fixed values when health is off
	cfg        config
	l          layout
	f          kf  // covariance
	x          vec // state mean
	clk        clock
	rejectRun  int
	bias       float64 // running mean of the normalised innovation
	counters   Counters
	floor      vec // smallest variances kept by a repair
	a          trans
	tmin, tmax float64
	// Parameters in the Arrhenius form depend on the temperature only: their last
	// values, per branch (R, C) and for R0, so that a steady temperature costs no
	// exponentials.
	memo   [cell.MaxBranches][2]memo
	r0Memo memo
	biasW  memo // weight of the innovation mean for the last sample interval
}

// memo is a value remembered for one argument.
type memo struct {
	arg, v float64
	ok     bool
}

// param returns p.At(z, tk) and p.SOCDeriv(z, tk), bit for bit as those methods give
// them, from one table lookup when p is tabulated; otherwise the value depends on tk
// only and is remembered in m.
func param(p *cell.Param, m *memo, z, tk float64) (v, dz float64) {
	if p.Table != nil {
		return p.Table.AtDeriv(z, tk)
	}
	if !m.ok || m.arg != tk {
		*m = memo{arg: tk, v: p.At(z, tk), ok: true}
	}
	return m.v, 0
}

// NewEKF returns a filter for pack p (whose Type must have passed cell.Type.Validate)
// initialised at state of charge soc with standard deviation Settings.InitialSOCSigma,
// RC branches at rest, hysteresis zero, and health factors at the pack's own values. nil
// settings select the defaults. Use [EKF.InitFromVoltage] to start from a rested voltage
// instead.
func NewEKF(p cell.Pack, soc float64, s *Settings) (*EKF, error) {
	if p.Type == nil || p.Type.OCV == nil {
		panic("estimate: pack without a validated type")
	}
	if err := p.Validate(); err != nil {
		return nil, fmt.Errorf("estimate: %w", err)
	}
	if err := s.Validate(); err != nil {
		return nil, err
	}
	f := &EKF{pack: p, cfg: resolve(p, s)}
	f.l = newLayout(p.Type, f.cfg.health)
	f.f.n = f.l.n
	f.tmin, f.tmax = ocvTempRange(p.Type)
	f.floor[0] = 1e-12
	for i := 1; i < maxDim; i++ {
		f.floor[i] = 1e-14
	}
	if f.l.ic >= 0 {
		f.floor[f.l.ic], f.floor[f.l.ir] = 1e-12, 1e-12
	}
	if err := f.InitSOC(soc); err != nil {
		return nil, err
	}
	return f, nil
}

// InitSOC restarts the estimate at state of charge soc (0–1) with standard deviation
// Settings.InitialSOCSigma: RC branches at rest, hysteresis zero, health factors at the
// pack's values (or the current estimate's, if health estimation is on and has
// started). The clock and the counters carry on.
func (f *EKF) InitSOC(soc float64) error {
	if err := cell.CheckSOC("soc", soc); err != nil {
		return err
	}
	f.reset(soc, f.cfg.initSOCVar)
	return nil
}

// InitFromVoltage restarts the estimate from a rested pack voltage v (V) at
// temperature tk (K): the SOC is the inverse OCV of the cell voltage, its standard
// deviation what the voltage noise, the rest model error and any hysteresis allow
// through the OCV slope (at least 0.02), the RC branches at rest. It assumes the pack
// has rested long enough for its RC voltages to decay; the clock and counters carry on.
func (f *EKF) InitFromVoltage(v, tk float64) error {
	soc, variance, err := socFromVoltage(f.pack, &f.cfg, v, tk)
	if err != nil {
		return err
	}
	f.reset(soc, variance)
	f.clk.restSeconds = max(f.clk.restSeconds, f.cfg.restDuration)
	return nil
}

// socFromVoltage inverts the OCV at a rested voltage and returns the SOC and its
// variance.
func socFromVoltage(p cell.Pack, c *config, v, tk float64) (soc, variance float64, err error) {
	if !cell.Finite(v) || v <= 0 || v >= c.vMax {
		return 0, 0, cell.Invalid("voltage", "rested voltage must be positive and below %g V, got %g", c.vMax, v)
	}
	if !cell.Finite(tk) || tk < minKelvin || tk > maxKelvin {
		return 0, 0, cell.Invalid("temperature", "must be %g to %g K, got %g", minKelvin, maxKelvin, tk)
	}
	ns := float64(p.Series)
	ocv := p.Type.OCV
	soc = min(1, max(0, ocv.Inverse(v/ns, tk)))
	slope := ocv.Deriv(soc, tk)
	hm := p.Type.Hysteresis.Max
	vv := (c.voltVar+c.restModelVar)/(ns*ns) + hm*hm
	sigma := 0.5
	if slope > 0 {
		sigma = min(0.5, max(0.02, math.Sqrt(vv)/slope))
	}
	return soc, sigma * sigma, nil
}

// reset sets the state mean and covariance for a new start at soc.
func (f *EKF) reset(soc, socVar float64) {
	l := f.l
	capf, resf := f.healthFactors()
	f.x = vec{}
	f.f.p = mat{}
	f.x[0] = soc
	f.f.p[0][0] = socVar
	for k := range l.nb {
		f.f.p[1+k][1+k] = f.cfg.initBranch
	}
	if l.ih >= 0 {
		// Unknown hysteresis: uniform on ±Max has variance Max²/3.
		m := f.pack.Type.Hysteresis.Max
		f.f.p[l.ih][l.ih] = m * m / 3
	}
	if l.ic >= 0 {
		f.x[l.ic], f.x[l.ir] = capf, resf
		f.f.p[l.ic][l.ic] = f.cfg.capVar0
		f.f.p[l.ir][l.ir] = f.cfg.resVar0
	}
	f.rejectRun, f.bias = 0, 0
}

// healthFactors returns the capacity and resistance factors in force: the estimates
// when health estimation has started, else the pack's fixed values.
func (f *EKF) healthFactors() (capf, resf float64) {
	if f.l.ic >= 0 && f.x[f.l.ic] > 0 {
		return f.x[f.l.ic], f.x[f.l.ir]
	}
	return packFactors(f.pack)
}

// packFactors returns a pack's capacity and resistance factors, 1 where unset.
func packFactors(p cell.Pack) (capf, resf float64) {
	return or(p.CapacityFactor, 1), or(p.ResistanceFactor, 1)
}

// model returns the pack with the health factors in force and the cell state of the
// mean.
func (f *EKF) model() (cell.Pack, cell.State) {
	pk := f.pack
	if f.l.ic >= 0 {
		pk.CapacityFactor, pk.ResistanceFactor = f.x[f.l.ic], f.x[f.l.ir]
	}
	cs := cell.State{SOC: f.x[0]}
	for k := range f.l.nb {
		cs.V[k] = f.x[1+k]
	}
	if f.l.ih >= 0 {
		cs.H = f.x[f.l.ih]
	}
	return pk, cs
}

// Update processes one sample and returns the estimate after it. A sample that cannot
// be used (time not increasing, implausible current or temperature) returns an error
// and leaves the filter unchanged; the returned estimate then describes the unchanged
// state, with Voltage and Innovation NaN. A NaN, infinite or saturated reading is
// counted and flagged FlagInvalid, likewise without changing the state. Update does not
// allocate.
func (f *EKF) Update(s Sample) (Estimate, error) {
	flags, ok, err := f.cfg.admit(s, &f.clk, &f.counters)
	if !ok {
		return unusable(f.estimate(s.Time, flags)), err
	}
	prevTime := math.Inf(-1)
	if f.clk.started {
		prevTime = f.clk.time
	}
	pl := f.cfg.plan(s, f.clk)
	flags |= pl.flags
	for _, sg := range pl.seg[:pl.n] {
		f.predict(sg)
	}
	f.clk = pl.clk
	flags |= tempFlag(f.pack.Type, f.tmin, f.tmax, s.Current, s.Temperature)

	// Measurement update (scalar).
	rest := flags&FlagRest != 0
	yhat, h, r := f.measurement(&f.x, s.Current, s.Temperature, rest, s.Time-prevTime)
	innov := s.Voltage - yhat
	sv, ph := f.f.innovationVar(&h, r)
	nis := innov * innov / sv
	sigma := math.Sqrt(sv)
	// Gate and divergence watch. A consistent filter sees NIS above the gate with
	// probability 1 − GateProbability and above suspectNIS (3σ) with probability
	// 0.27 %, and its normalised innovations average to zero. A run of MaxRejections
	// samples beyond 3σ, or a normalised innovation that averages beyond biasLimit over
	// biasTime (ten model-error correlation times, 10 min by default), means the
	// state, not the sensor, is wrong (a bad start, a jump the model did not see): the
	// covariance is inflated and the measurement accepted. Without this the filter
	// could stay locked out by its gate, or crawl towards the truth with a tiny gain
	// when it is overconfident. The long averaging time keeps short model failures,
	// such as the voltage knee at the end of a discharge, from triggering it.
	if nis > min(f.cfg.gate, suspectNIS) {
		f.rejectRun++
	} else {
		f.rejectRun = 0
	}
	if dt := s.Time - prevTime; nis <= f.cfg.gate && dt < math.Inf(1) {
		if !f.biasW.ok || f.biasW.arg != dt {
			f.biasW = memo{arg: dt, v: -math.Expm1(-dt / f.cfg.biasTime), ok: true}
		}
		f.bias += f.biasW.v * (innov/sigma - f.bias)
	}
	accept := true
	switch {
	case f.rejectRun >= f.cfg.maxReject || math.Abs(f.bias) > biasLimit:
		f.inflate(innov*innov, sv, r)
		sv, ph = f.f.innovationVar(&h, r)
		flags |= FlagForced
		f.counters.Forced++
		f.rejectRun, f.bias = 0, 0
	case nis > f.cfg.gate:
		accept = false
		flags |= FlagRejected
		f.counters.Rejected++
	}
	if accept {
		if dz := ph[0] / sv * innov; math.Abs(dz) > iterateSOCStep {
			f.iterate(s, rest, s.Time-prevTime, r)
		} else {
			f.f.update(&f.x, &h, r, innov, sv, &ph)
		}
		f.counters.Updates++
	}
	flags |= f.clamp()
	if !f.f.positiveDefinite() {
		f.f.repair(&f.floor)
		f.counters.Repairs++
		flags |= FlagRepaired
	}
	e := f.estimate(s.Time, flags)
	e.Voltage, e.Innovation = yhat, innov
	e.InnovationSigma, e.NIS = sigma, nis
	return e, nil
}

// predict advances the mean and the covariance over one segment of constant current.
//
// The mean follows [cell.Pack.Step] exactly (the same expressions in the same order, so
// the filter and the simulator agree to the last bit; TestPredictionMatchesStep holds
// them together). It is computed here rather than by calling Step because the
// Jacobian needs Step's coefficients, and evaluating the parameter tables and
// exponentials twice would double the cost of an update.
//
// With ic the cell current, q = 3600·Q·c the cell charge (Q rated Ah, c capacity
// factor), η the coulombic efficiency and ρ the resistance factor, Step computes
//
//	z⁺ = z − η·ic·Δt/q
//	vₖ⁺ = aₖ·vₖ + ρRₖ·(1−aₖ)·uₖ,  aₖ = exp(−gₖ), gₖ = Δt/(ρRₖCₖ), Rₖ, Cₖ at (z, T)
//	h⁺ = b·h + (1−b)·m,  b = exp(−κ|ic|), κ = ηγΔt/q, m = −M·sign(ic)
//
// with uₖ = ic for an ohmic branch and the Butler–Volmer effective current of a
// charge-transfer branch (cell.Branch.Drive). With wₖ = vₖ − ρRₖ·uₖ the non-zero
// Jacobian entries are
//
//	∂z⁺/∂z = 1,  ∂z⁺/∂c = η·ic·Δt/(q·c)
//	∂vₖ⁺/∂vₖ = aₖ
//	∂vₖ⁺/∂z = (aₖgₖwₖ/Rₖ + ρ(1−aₖ)uₖ)·dRₖ/dz + (aₖgₖwₖ/Cₖ)·dCₖ/dz + ρRₖ(1−aₖ)·∂uₖ/∂z
//	∂vₖ⁺/∂ρ = aₖgₖwₖ/ρ + Rₖ(1−aₖ)·uₖ
//	∂h⁺/∂h = b,  ∂h⁺/∂c = b·κ|ic|/c·(h − m)
//
// and the input column, for the current-sensor noise, is ∂z⁺/∂i = −η·Δt/(q·P),
// ∂vₖ⁺/∂i = ρRₖ(1−aₖ)·(∂uₖ/∂ic)/P, ∂h⁺/∂i = −κ·sign(ic)·b·(h − m)/P for a pack of P
// cells in parallel.
func (f *EKF) predict(sg segment) {
	if sg.dt <= 0 {
		return
	}
	l := f.l
	var b, qd vec
	xn, dz := f.transition(sg, &f.a, &b)
	// Process noise: the current sensor's noise through the input column, plus the
	// random walks.
	qd[0] = f.cfg.socVarRate*sg.dt + f.cfg.gainVar*dz*dz
	if sg.gap {
		qd[0] += gapVar(f.cfg.gapVarRate*sg.dt, f.f.p[0][0])
	}
	for k := range l.nb {
		qd[1+k] = f.cfg.branchVar * sg.dt
	}
	if l.ih >= 0 {
		qd[l.ih] = f.cfg.branchVar * sg.dt
	}
	if l.ic >= 0 {
		qd[l.ic] = f.cfg.capVarRate * sg.dt
		qd[l.ir] = f.cfg.resVarRate * sg.dt
	}
	f.f.predict(&f.a, &b, f.cfg.currentVar, &qd)
	f.x = xn
}

// transition returns the mean after one segment and the SOC decrement η·ic·Δt/q, and
// writes the Jacobian into a and the input column ∂x⁺/∂i into b.
func (f *EKF) transition(sg segment, a *trans, b *vec) (xn vec, dz float64) {
	l := f.l
	pk := f.pack
	if l.ic >= 0 {
		pk.CapacityFactor, pk.ResistanceFactor = f.x[l.ic], f.x[l.ir]
	}
	t := pk.Type
	n := l.n
	par := float64(pk.Parallel)
	ic := sg.i / par
	z, dt, tk := f.x[0], sg.dt, sg.tk
	eta := 1.0
	if ic < 0 {
		eta = t.Efficiency()
	}
	capf, rf := packFactors(pk)
	q := 3600 * pk.CellCapacityAh()

	a.reset(n)
	dz = eta * ic * dt / q
	xn[0] = z - dz // Step: s.SOC = z - eta*ic*dt/q
	b[0] = -eta * dt / q / par
	if l.ic >= 0 {
		a.set(0, l.ic, dz/capf)
		xn[l.ic], xn[l.ir] = f.x[l.ic], f.x[l.ir]
	}
	for k := range l.nb {
		br := &t.Branches[k]
		r, dr := param(&br.R, &f.memo[k][0], z, tk)
		c, dc := param(&br.C, &f.memo[k][1], z, tk)
		rr := r * rf // Step: r := b.R.At(z, tk) * rf
		g := dt / (rr * c)
		ak := math.Exp(-g)
		v := f.x[1+k]
		u, dudi, dudz := ic, 1.0, 0.0
		if br.ExchangeCurrent != nil {
			u, dudi = br.Drive(ic, z, tk) // as Step
			dudz = driveSOCDeriv(br, ic, z, tk)
		}
		xn[1+k] = ak*v + rr*(1-ak)*u // Step: a*s.V[k] + r*(1-a)*u
		w := v - rr*u
		a.d[1+k] = ak
		if dr != 0 || dc != 0 || dudz != 0 {
			a.set(1+k, 0, (ak*g*w/r+rf*(1-ak)*u)*dr+ak*g*w/c*dc+rr*(1-ak)*dudz)
		}
		if l.ir >= 0 {
			a.set(1+k, l.ir, ak*g*w/rf+r*(1-ak)*u)
		}
		b[1+k] = rr * (1 - ak) * dudi / par
	}
	if l.ih >= 0 {
		h := f.x[l.ih]
		xn[l.ih] = h
		if hy := t.Hysteresis; ic != 0 {
			bb := math.Exp(-math.Abs(eta * ic * hy.Gamma * dt / q)) // as Step
			m := -hy.Max
			if ic < 0 {
				m = hy.Max
			}
			xn[l.ih] = bb*h + (1-bb)*m
			kappa := math.Abs(eta * hy.Gamma * dt / q)
			d := h - m
			a.d[l.ih] = bb
			if l.ic >= 0 {
				a.set(l.ih, l.ic, bb*kappa*math.Abs(ic)/capf*d)
			}
			b[l.ih] = -kappa * math.Copysign(1, ic) * bb * d / par
		}
	}
	return xn, dz
}

// driveSOCDeriv returns ∂u/∂z for a charge-transfer branch, whose effective current
// u = i₂·asinh(ic/i₂) (i₂ = 2·i₀, cell.Branch.Drive) depends on the SOC through a
// tabulated exchange current: ∂u/∂i₂ = asinh(x) − x/√(1 + x²) with x = ic/i₂.
func driveSOCDeriv(br *cell.Branch, ic, z, tk float64) float64 {
	d := br.ExchangeCurrent.SOCDeriv(z, tk)
	if d == 0 {
		return 0
	}
	i2 := 2 * br.ExchangeCurrent.At(z, tk)
	if !(i2 > 0) {
		return 0
	}
	x := ic / i2
	return (math.Asinh(x) - x/math.Sqrt(1+x*x)) * 2 * d
}

// measurement returns the modelled pack voltage at the mean for pack current i and
// temperature tk (the expressions of cell.Pack.Voltage, in its order), the measurement
// row H and the measurement noise variance for a sample dt seconds after the previous
// one (+Inf for the first). With S cells in series,
// y = S·(OCV(z) + h − ρR0(z)·ic − Σvₖ), so H = S·[dOCV/dz − ρ·dR0/dz·ic, −1 …, +1, 0,
// −R0·ic].
func (f *EKF) measurement(x *vec, i, tk float64, rest bool, dt float64) (yhat float64, h vec, r float64) {
	l := f.l
	t := f.pack.Type
	ns := float64(f.pack.Series)
	par := float64(f.pack.Parallel)
	ic := i / par
	z := x[0]
	_, rf := packFactors(f.pack)
	if l.ir >= 0 {
		rf = x[l.ir]
	}
	hv := 0.0
	if l.ih >= 0 {
		hv = x[l.ih]
	}
	r0, dr0 := param(&t.R0, &f.r0Memo, z, tk)
	ocv, docv := t.OCV.AtDeriv(z, tk)
	v := (ocv + hv) - (r0*rf)*ic // CellVoltage: OCV + H − R0·ic
	for k := range l.nb {
		v -= x[1+k]
	}
	yhat = v * ns
	h[0] = ns * (docv - rf*dr0*ic)
	for k := range l.nb {
		h[1+k] = -ns
	}
	if l.ih >= 0 {
		h[l.ih] = ns
	}
	if l.ir >= 0 {
		h[l.ir] = -ns * r0 * ic
	}
	model := f.cfg.modelVar
	if rest {
		model = f.cfg.restModelVar
	}
	if f.cfg.paramErr2 > 0 {
		drop := math.Abs(r0 * rf * ic)
		for k := range l.nb {
			drop += math.Abs(x[1+k])
		}
		model += f.cfg.paramErr2 * drop * drop * ns * ns
	}
	if dt < f.cfg.modelTau {
		model *= f.cfg.modelTau / dt
	}
	dydi := ns * rf * r0 / par
	r = f.cfg.voltVar + model + dydi*dydi*f.cfg.currentVar
	return yhat, h, r
}

// iterateSOCStep is the SOC correction above which the measurement update is iterated:
// one linearisation at the predicted state is accurate for small corrections only.
const iterateSOCStep = 0.01

// iterate applies the measurement of sample s by the iterated extended Kalman filter
// (Bell and Cathey, IEEE Trans. Automatic Control 38(2):294–297, 1993 [from memory]): a
// Gauss–Newton search for the maximum a posteriori state, relinearising the measurement
// at each iterate xᵢ (held within the state bounds):
//
//	xᵢ₊₁ = x⁻ + Kᵢ·(y − h(xᵢ) − Hᵢ·(x⁻ − xᵢ)),  Kᵢ = P⁻Hᵢᵀ/(HᵢP⁻Hᵢᵀ + R)
//
// and the covariance updated (Joseph form) with the last gain and row. A large
// correction, such as the first rested voltage after a wrong initial SOC on a curved
// OCV, would otherwise overshoot.
func (f *EKF) iterate(s Sample, rest bool, dt, r float64) {
	x0 := f.x
	xi := f.x
	var h, ph vec
	var e, sv float64
	for range 6 {
		var yhat float64
		yhat, h, _ = f.measurement(&xi, s.Current, s.Temperature, rest, dt)
		e = s.Voltage - yhat
		for j := range f.l.n {
			e -= h[j] * (x0[j] - xi[j])
		}
		sv, ph = f.f.innovationVar(&h, r)
		next := x0
		for j := range f.l.n {
			next[j] += ph[j] / sv * e
		}
		next[0] = min(socMax, max(socMin, next[0]))
		if f.l.ic >= 0 {
			next[f.l.ic] = min(capMax, max(capMin, next[f.l.ic]))
			next[f.l.ir] = min(resMax, max(resMin, next[f.l.ir]))
		}
		done := math.Abs(next[0]-xi[0]) < 1e-6
		xi = next
		if done {
			break
		}
	}
	f.x = x0
	f.f.update(&f.x, &h, r, e, sv, &ph)
}

// inflate scales the covariance of the dynamic states (SOC, RC, hysteresis) so that an
// innovation e2 = e² becomes plausible: by α = (e² − r)/(s − r) where s is the
// innovation variance, but never so far that the SOC standard deviation exceeds
// maxInflatedSOCSigma (a voltage the model cannot explain at all, such as the knee at
// the end of discharge, must not erase what the filter knows). Scaling rows and
// columns by √α keeps P positive definite.
func (f *EKF) inflate(e2, s, r float64) {
	alpha := 1.0
	if s > r {
		alpha = (e2 - r) / (s - r)
	}
	limit := maxInflatedSOCSigma * maxInflatedSOCSigma / f.f.p[0][0]
	alpha = min(max(alpha, 1), max(1, limit))
	sq := math.Sqrt(alpha)
	var d vec
	for i := range f.l.n {
		d[i] = sq
	}
	if f.l.ic >= 0 {
		d[f.l.ic], d[f.l.ir] = 1, 1
	}
	for i := range f.l.n {
		for j := range f.l.n {
			f.f.p[i][j] *= d[i] * d[j]
		}
	}
}

// maxGapSOCSigma bounds the SOC standard deviation that gaps in the log can build up.
const maxGapSOCSigma = 0.3

// gapVar returns the SOC variance a gap adds to a variance p, limited so that the
// total stays within maxGapSOCSigma.
func gapVar(add, p float64) float64 {
	return max(0, min(add, maxGapSOCSigma*maxGapSOCSigma-p))
}

// suspectNIS is the normalised innovation squared that a consistent filter exceeds
// with probability 0.27 % (3σ): a run of such samples triggers covariance inflation.
const suspectNIS = 9

// biasLimit is the running mean of the normalised innovation beyond which the filter
// concludes that its state is biased. Model error, being part of the predicted
// innovation variance, keeps the mean well below 1; a state error of a few innovation
// standard deviations takes it above.
const biasLimit = 1.5

// maxInflatedSOCSigma bounds the SOC standard deviation that a forced acceptance can
// create.
const maxInflatedSOCSigma = 0.2

// clamp holds the states within their bounds and reports what it did.
func (f *EKF) clamp() Flags {
	var fl Flags
	z := f.x[0]
	if z < 0 || z > 1 {
		fl |= FlagSOCRange
		f.x[0] = min(socMax, max(socMin, z))
	}
	if f.l.ic >= 0 {
		c, r := f.x[f.l.ic], f.x[f.l.ir]
		if c < capMin || c > capMax || r < resMin || r > resMax {
			fl |= FlagHealthClamped
			f.x[f.l.ic] = min(capMax, max(capMin, c))
			f.x[f.l.ir] = min(resMax, max(resMin, r))
		}
	}
	return fl
}

// estimate reports the present state.
func (f *EKF) estimate(t float64, flags Flags) Estimate {
	e := Estimate{
		Time:     t,
		SOC:      min(1, max(0, f.x[0])),
		SOCSigma: math.Sqrt(f.f.p[0][0]),
		Flags:    flags,
	}
	e.CapacityFactor, e.ResistanceFactor = f.healthFactors()
	if f.l.ic >= 0 {
		e.CapacitySigma = math.Sqrt(f.f.p[f.l.ic][f.l.ic])
		e.ResistanceSigma = math.Sqrt(f.f.p[f.l.ir][f.l.ir])
	}
	return e
}

// Counters returns what the filter has done so far.
func (f *EKF) Counters() Counters { return f.counters }

// State returns the filter's complete state, for persisting.
func (f *EKF) State() State {
	l := f.l
	st := State{
		Dim: l.n, Branches: l.nb, Hysteresis: l.ih >= 0, Health: l.ic >= 0,
		SOC: f.x[0], Covariance: f.f.p,
		Started: f.clk.started, Time: f.clk.time, HeldCurrent: f.clk.heldCurrent,
		HeldTemperature: f.clk.heldTemp, RestSeconds: f.clk.restSeconds,
		RejectRun: f.rejectRun, InnovationMean: f.bias, Counters: f.counters,
	}
	for k := range l.nb {
		st.BranchVolts[k] = f.x[1+k]
	}
	if l.ih >= 0 {
		st.HysteresisVolts = f.x[l.ih]
	}
	st.CapacityFactor, st.ResistanceFactor = f.healthFactors()
	return st
}

// Restore replaces the filter's state by st, which must come from State of a filter
// with the same layout (type structure and health setting). It returns a
// [*cell.FieldError] and leaves the filter unchanged if st is unusable.
func (f *EKF) Restore(st State) error {
	if err := f.l.check(&st); err != nil {
		return err
	}
	l := f.l
	if l.ic < 0 {
		capf, resf := f.healthFactors()
		if st.CapacityFactor != capf || st.ResistanceFactor != resf {
			return cell.Invalid("state", "health factors %g, %g differ from the pack's fixed %g, %g", st.CapacityFactor, st.ResistanceFactor, capf, resf)
		}
	}
	f.x = vec{}
	f.x[0] = st.SOC
	for k := range l.nb {
		f.x[1+k] = st.BranchVolts[k]
	}
	if l.ih >= 0 {
		f.x[l.ih] = st.HysteresisVolts
	}
	if l.ic >= 0 {
		f.x[l.ic], f.x[l.ir] = st.CapacityFactor, st.ResistanceFactor
	}
	f.f.p = st.Covariance
	f.clk = clock{started: st.Started, time: st.Time, heldCurrent: st.HeldCurrent,
		heldTemp: st.HeldTemperature, restSeconds: st.RestSeconds}
	f.rejectRun, f.bias = st.RejectRun, st.InnovationMean
	f.counters = st.Counters
	return nil
}
