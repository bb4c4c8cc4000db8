//! Arbitrary bytes as a FITS file through the public entry point `read_catalogue`: Ok or an
//! error, never a panic or an allocation sized by a lying header.
#![no_main]
use libfuzzer_sys::fuzz_target;
use ringscale::catalog::{read_catalogue, ColumnMap, RowFilter};

fuzz_target!(|data: &[u8]| {
    let path = std::env::temp_dir().join(format!("ringscale-fuzz-{}.fits", std::process::id()));
    if std::fs::write(&path, data).is_err() {
        return;
    }
    let map = ColumnMap::sky("RA", "DEC", "Z", vec!["WEIGHT".into()], None);
    if let Ok(cat) = read_catalogue(&path, &map, &RowFilter::default()) {
        assert!(cat.dec().iter().all(|d| d.abs() <= 90.0));
        assert!(cat.redshift().iter().all(|z| *z > 0.0));
    }
});
