package ageing

import (
	"encoding/binary"
	"math"
	"testing"
)

// FuzzProject feeds arbitrary capacity histories to Project: it must return an error or
// an ordered interval, never panic.
func FuzzProject(f *testing.F) {
	f.Add([]byte{0, 0, 0, 0, 0, 0, 0xf0, 0x3f}, 0.8)
	f.Add(make([]byte, 80), 0.5)
	seed := make([]byte, 0, 160)
	for k := range 20 {
		seed = binary.LittleEndian.AppendUint64(seed, math.Float64bits(2-0.01*float64(k)))
	}
	f.Add(seed, 0.8)
	f.Fuzz(func(t *testing.T, data []byte, eol float64) {
		var cycles, q []float64
		for k := 0; k+8 <= len(data) && k < 8*400; k += 8 {
			cycles = append(cycles, float64(k/8+1))
			q = append(q, math.Float64frombits(binary.LittleEndian.Uint64(data[k:])))
		}
		r, err := Project(Problem{Cycles: cycles, Capacity: q}, &Settings{EndOfLife: eol})
		if err != nil {
			return
		}
		c := r.Cycles
		if math.IsNaN(c.Value) || math.IsNaN(c.Low) || math.IsNaN(c.High) || !(c.Low <= c.Value && c.Value <= c.High) {
			t.Errorf("Project(%v) = %+v; want an ordered interval", q, c)
		}
	})
}
