//! Arbitrary bytes as a CSV catalogue: the reader must return Ok or an input error, never panic.
#![no_main]
use libfuzzer_sys::fuzz_target;
use ringscale::catalog::{read_catalogue, ColumnMap, RowFilter};

fuzz_target!(|data: &[u8]| {
    let path = std::env::temp_dir().join(format!("ringscale-fuzz-{}.csv", std::process::id()));
    if std::fs::write(&path, data).is_err() {
        return;
    }
    let maps = [
        ColumnMap::default_sky(),
        ColumnMap::sky("RA", "DEC", "Z", vec!["W".into()], Some("R".into())),
        ColumnMap::cartesian("X", "Y", "Z", vec![], None),
    ];
    let filter = RowFilter {
        z_min: Some(0.1),
        z_max: Some(1.0),
    };
    for map in &maps {
        if let Ok(cat) = read_catalogue(&path, map, &filter) {
            // Whatever is accepted satisfies the documented validation.
            assert!(cat.w.iter().all(|w| w.is_finite() && *w >= 0.0));
            assert!(cat.pos.iter().all(|c| c.len() == cat.len()));
        }
    }
});
