//! Errors raised when plant parameters are out of their physical range.

use thiserror::Error;

/// A plant parameter set that cannot describe a physical device.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum PlantError {
    /// A field holds a value outside its allowed range.
    #[error("invalid parameter `{field}`: {reason}")]
    Invalid {
        /// Name of the offending field (as written in TOML).
        field: &'static str,
        /// What the field must satisfy.
        reason: &'static str,
    },
    /// The photodiode responsivity exceeds the ideal q lambda / (h c).
    #[error(
        "responsivity {responsivity_a_per_w} A/W exceeds the ideal {ideal_a_per_w} A/W at {wavelength_nm} nm"
    )]
    Responsivity {
        /// Responsivity given.
        responsivity_a_per_w: f64,
        /// Ideal responsivity at the stated wavelength.
        ideal_a_per_w: f64,
        /// Wavelength the responsivity is stated at, nm.
        wavelength_nm: f64,
    },
    /// A TOML document could not be parsed into the parameter struct.
    #[error("TOML: {0}")]
    Toml(String),
}

/// Returns `Err(PlantError::Invalid)` unless `ok` holds.
#[inline]
pub(crate) fn ensure(
    ok: bool,
    field: &'static str,
    reason: &'static str,
) -> Result<(), PlantError> {
    if ok {
        Ok(())
    } else {
        Err(PlantError::Invalid { field, reason })
    }
}

/// Parses a parameter struct from a TOML document.
pub fn from_toml<T: serde::de::DeserializeOwned>(text: &str) -> Result<T, PlantError> {
    toml::from_str(text).map_err(|e| PlantError::Toml(e.to_string()))
}
