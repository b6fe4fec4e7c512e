//! Physical constants (CODATA 2018) and the unit system of the engine.
//!
//! Job files and every internal quantity use nanometres (nm), femtoseconds (fs) and
//! electronvolts (eV). Momenta are carried as wavevectors k = p/ħ in 1/nm, masses in
//! eV·fs²/nm². This module is the only place where numbers such as ħ appear.

/// Reduced Planck constant ħ in eV·fs (CODATA 2018: 6.582119569e-16 eV·s).
pub const HBAR: f64 = 0.658_211_956_9;

/// Electron mass m_e in eV·fs²/nm²: m_e c² = 0.51099895000 MeV, c = 299.792458 nm/fs.
pub const ELECTRON_MASS: f64 = 0.510_998_950_00e6 / (299.792_458 * 299.792_458);

/// Coulomb constant e²/(4πε₀) = αħc in eV·nm (CODATA 2018).
pub const COULOMB: f64 = 1.439_964_547;

/// Mass in eV·fs²/nm² of a particle of `m_rel` electron masses.
pub fn mass_from_electron_masses(m_rel: f64) -> f64 {
    m_rel * ELECTRON_MASS
}

/// Velocity (nm/fs) of wavevector `k` (1/nm) for mass `m` (eV·fs²/nm²): v = ħk/m.
#[inline]
pub fn velocity(k: f64, m: f64) -> f64 {
    HBAR * k / m
}

/// Kinetic energy (eV) ħ²k²/(2m).
#[inline]
pub fn kinetic_energy(k: f64, m: f64) -> f64 {
    HBAR * HBAR * k * k / (2.0 * m)
}

#[cfg(test)]
mod tests {
    use super::*;

    // CODATA 2018 recommended values, as listed in docs/method.md §6.
    #[test]
    fn electron_mass_in_engine_units() {
        assert!((ELECTRON_MASS - 5.685_630_1).abs() < 1e-6);
    }

    // CODATA 2018: ħ²/(2 m_e) = 0.0380998 eV·nm².
    #[test]
    fn hbar_squared_over_two_me() {
        let v = HBAR * HBAR / (2.0 * ELECTRON_MASS);
        assert!((v - 0.038_099_8).abs() < 1e-7, "{v}");
    }
}
