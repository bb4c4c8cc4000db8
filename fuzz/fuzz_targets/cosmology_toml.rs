//! Arbitrary text as a cosmology TOML: parse errors are input errors, and any accepted
//! cosmology has E(z)^2 > 0 out to z = 10 as `validate` promises.
#![no_main]
use libfuzzer_sys::fuzz_target;
use ringscale::cosmology::Cosmology;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Cosmology::from_toml_str(text) {
        Ok(c) => {
            for i in 0..=100 {
                let z = i as f64 * 0.1;
                assert!(c.e2(z) > 0.0, "accepted cosmology with E^2 <= 0 at z = {z}");
            }
        }
        Err(e) => assert_eq!(e.exit_code(), 2),
    }
});
