package ageing

import (
	"math"

	"github.com/voltcast/voltcast/model/cell"
)

// Published semi-empirical fade laws (../shared/REFERENCE.md §2.11). Their coefficients
// were recalled, not read from the papers here ("from memory"): use these laws for
// what-if estimates, and prefer a fit to the battery's own capacity history ([Project]).

// wangB is the pre-exponential factor of Wang et al. (2011) against C-rate
// [from memory; REFERENCE.md §2.11].
var wangB = [...]struct{ rate, b float64 }{{0.5, 31630}, {2, 21681}, {6, 12934}, {10, 15512}}

// CycleLossLFP returns the capacity loss in percent of a graphite/LiFePO4 cell after
// throughputAh of charge throughput at the given discharge C-rate and cell temperature
// (kelvin), by the cycle-life model of Wang J. et al., "Cycle-life model for
// graphite-LiFePO4 cells", J. Power Sources 196:3942–3948, 2011:
//
//	Q_loss[%] = B(C)·exp(−(31700 − 370.3·C)/(R·T))·Ah^0.55
//
// B(C) is the paper's factor at C/2, 2C, 6C and 10C, interpolated linearly in between
// (our choice; the paper gives only those rates). Coefficients are from memory (see
// REFERENCE.md §2.11). Rates outside 0.5–10 C, temperatures outside 0–60 °C and
// negative throughput are reported as a [*cell.FieldError].
func CycleLossLFP(cRate, tempK, throughputAh float64) (float64, error) {
	if !cell.Finite(cRate) || cRate < 0.5 || cRate > 10 {
		return 0, cell.Invalid("c_rate", "must be within the model's 0.5–10 C, got %g", cRate)
	}
	if !cell.Finite(tempK) || tempK < cell.CelsiusOffset || tempK > cell.CelsiusOffset+60 {
		return 0, cell.Invalid("temperature_kelvin", "must be within 273.15–333.15 K, got %g", tempK)
	}
	if !cell.Finite(throughputAh) || throughputAh < 0 {
		return 0, cell.Invalid("throughput_amp_hours", "must be finite and ≥ 0, got %g", throughputAh)
	}
	b := wangB[len(wangB)-1].b
	for k := 1; k < len(wangB); k++ {
		if cRate <= wangB[k].rate {
			lo, hi := wangB[k-1], wangB[k]
			b = lo.b + (hi.b-lo.b)*(cRate-lo.rate)/(hi.rate-lo.rate)
			break
		}
	}
	return b * math.Exp(-(31700-370.3*cRate)/(cell.GasConstant*tempK)) * math.Pow(throughputAh, 0.55), nil
}

// CalendarLossNMC returns the fractional capacity loss of an NMC/graphite 18650 cell
// stored at voltage volts and temperature tempK (kelvin) for days, by the calendar term of
// Schmalstieg J. et al., "A holistic aging model for Li(NiMnCo)O2 based 18650 lithium-ion
// batteries", J. Power Sources 257:325–334, 2014: α_cap·t^0.75 with
//
//	α_cap = (7.543·V − 23.75)·10⁶·exp(−6976/T)
//
// Coefficients from memory (REFERENCE.md §2.11); the test cell was a 2.05 Ah NMC 18650.
// The law is negative below about 3.15 V, where it does not apply: voltages outside
// 3.2–4.3 V, temperatures outside 0–70 °C and negative days are a [*cell.FieldError].
func CalendarLossNMC(volts, tempK, days float64) (float64, error) {
	if !cell.Finite(volts) || volts < 3.2 || volts > 4.3 {
		return 0, cell.Invalid("voltage_volts", "must be within 3.2–4.3 V, got %g", volts)
	}
	if !cell.Finite(tempK) || tempK < cell.CelsiusOffset || tempK > cell.CelsiusOffset+70 {
		return 0, cell.Invalid("temperature_kelvin", "must be within 273.15–343.15 K, got %g", tempK)
	}
	if !cell.Finite(days) || days < 0 {
		return 0, cell.Invalid("days", "must be finite and ≥ 0, got %g", days)
	}
	alpha := (7.543*volts - 23.75) * 1e6 * math.Exp(-6976/tempK)
	return alpha * math.Pow(days, 0.75), nil
}

// CycleLossNMC returns the fractional capacity loss of the same NMC cell from cycling,
// by the throughput term of Schmalstieg et al. (2014): β_cap·√Q with
//
//	β_cap = 7.348·10⁻³·(V̄ − 3.667)² + 7.600·10⁻⁴ + 4.081·10⁻³·ΔDOD
//
// for mean cycling voltage meanVolts, depth of discharge dod (fraction) and charge
// throughput throughputAh. Coefficients from memory (REFERENCE.md §2.11). Mean voltages
// outside 3.2–4.3 V, a depth outside [0, 1] and negative throughput are a
// [*cell.FieldError].
func CycleLossNMC(meanVolts, dod, throughputAh float64) (float64, error) {
	if !cell.Finite(meanVolts) || meanVolts < 3.2 || meanVolts > 4.3 {
		return 0, cell.Invalid("mean_voltage_volts", "must be within 3.2–4.3 V, got %g", meanVolts)
	}
	if !cell.Finite(dod) || dod < 0 || dod > 1 {
		return 0, cell.Invalid("depth_of_discharge", "must be a fraction in [0, 1], got %g", dod)
	}
	if !cell.Finite(throughputAh) || throughputAh < 0 {
		return 0, cell.Invalid("throughput_amp_hours", "must be finite and ≥ 0, got %g", throughputAh)
	}
	d := meanVolts - 3.667
	beta := 7.348e-3*d*d + 7.600e-4 + 4.081e-3*dod
	return beta * math.Sqrt(throughputAh), nil
}
