package cell

// SOCDeriv returns ∂p/∂z, the derivative of the parameter with respect to state of
// charge at z and temperature tk (K): the table's slope when the parameter is tabulated,
// and 0 for the Arrhenius form, which does not depend on z. Estimators use it for their
// Jacobians. It does not allocate.
func (p *Param) SOCDeriv(z, tk float64) float64 {
	if p.Table != nil {
		return p.Table.Deriv(z, tk)
	}
	return 0
}
