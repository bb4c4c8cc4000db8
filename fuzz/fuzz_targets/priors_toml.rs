//! Arbitrary text as a priors TOML: Ok or an input error, never a panic; every accepted prior
//! then resolves (flat/gauss/fixed) to Ok or an input error and evaluates without panicking.
#![no_main]
use libfuzzer_sys::fuzz_target;
use ringscale::inference::Priors;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else {
        return;
    };
    match Priors::from_toml_str(text, "fuzz.toml") {
        Ok(p) => {
            for (name, q) in [
                ("omega_k", &p.omega_k),
                ("omega_m", &p.omega_m),
                ("h", &p.h),
                ("rd", &p.rd),
                ("omega_b_h2", &p.omega_b_h2),
                ("omega_c_h2", &p.omega_c_h2),
            ] {
                if let Some(q) = q {
                    match q.resolve(name) {
                        Ok(r) => {
                            let _ = r.ln_pdf(0.5);
                            let _ = r.box_range(5.0);
                        }
                        Err(e) => assert_eq!(e.exit_code(), 2),
                    }
                }
            }
        }
        Err(e) => assert_eq!(e.exit_code(), 2),
    }
});
