//! Physical constants, CODATA 2018 (exact values in the revised SI).

/// Avogadro constant, 1/mol (CODATA 2018, exact).
pub const AVOGADRO: f64 = 6.022_140_76e23;
/// Boltzmann constant, J/K (CODATA 2018, exact).
pub const BOLTZMANN: f64 = 1.380_649e-23;
/// Planck constant, J s (CODATA 2018, exact).
pub const PLANCK: f64 = 6.626_070_15e-34;
/// Molar gas constant R = N_A k, J/(mol K) (CODATA 2018, exact: 8.314 462 618... J/(mol K)).
pub const GAS_CONSTANT: f64 = AVOGADRO * BOLTZMANN;

/// RT in kJ/mol at temperature `t` (K).
pub fn rt_kj(t: f64) -> f64 {
    GAS_CONSTANT * t / 1000.0
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn gas_constant_is_the_codata_2018_value() {
        // CODATA 2018: R = 8.314 462 618... J/(mol K), exact by definition of N_A and k.
        assert!((GAS_CONSTANT - 8.314_462_618).abs() < 1e-9);
    }
}
