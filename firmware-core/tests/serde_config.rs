//! The `serde` feature: a configuration read back from its serialised form
//! is the same configuration, with the same fingerprint; a misspelt key is
//! refused by name. (Run with `--features serde`; without it this file is
//! empty.)
#![cfg(feature = "serde")]

use diodestat_core::{example, Config, Fx};

#[test]
fn a_configuration_reads_back_equal_with_its_fingerprint() {
    let c = example::config();
    let text = serde_json::to_string(&c).unwrap();
    let back: Config = serde_json::from_str(&text).unwrap();
    assert_eq!(back, c);
    assert_eq!(
        back.validate().unwrap().fingerprint(),
        c.validate().unwrap().fingerprint()
    );
}

#[test]
fn values_are_their_raw_bits_and_unknown_keys_are_refused() {
    let c = example::config();
    let mut v: serde_json::Value = serde_json::to_value(&c).unwrap();
    let kp = c.apc.kp_iu_per_ou.to_bits();
    assert_eq!(v["apc"]["kp_iu_per_ou"]["bits"], kp);
    v["apc"]["kp_iu_per_ou"]["bits"] = (kp + 1).into();
    let edited: Config = serde_json::from_value(v.clone()).unwrap();
    assert_eq!(
        edited.apc.kp_iu_per_ou,
        c.apc.kp_iu_per_ou + Fx::from_bits(1)
    );
    v["apc"]["kp_ma_per_vu"] = 1.into();
    let e = serde_json::from_value::<Config>(v).unwrap_err().to_string();
    assert!(e.contains("kp_ma_per_vu"), "{e}");
}

#[test]
fn a_section_reads_in_either_unit_into_the_same_values() {
    use diodestat_core::{CurrentForm, FormError, Units};
    let read = |json: &str| serde_json::from_str::<CurrentForm>(json).unwrap();
    // Floats are read by their decimal digits: 0.06 A is 60 mA exactly.
    let milli = read(r#"{"absolute_max_ma": 60, "ceiling_ma": 50}"#);
    let si = read(r#"{"absolute_max_a": 0.06, "ceiling_a": 0.05}"#);
    let u = Units::MILLI;
    assert_eq!(milli.to_section(u), si.to_section(u));
    assert_eq!(si.to_section(u).unwrap().ceiling_iu, Fx::from_num(50));
    let both = read(r#"{"absolute_max_ma": 60, "absolute_max_a": 0.06, "ceiling_ma": 50}"#);
    assert_eq!(
        both.to_section(u),
        Err(FormError::Both {
            milli: "current.absolute_max_ma",
            si: "current.absolute_max_a"
        })
    );
    let e = serde_json::from_str::<CurrentForm>(r#"{"ceiling_mA": 5}"#).unwrap_err();
    assert!(e.to_string().contains("ceiling_mA"), "{e}");
}
