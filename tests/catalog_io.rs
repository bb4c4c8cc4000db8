//! Catalogue readers and writers: bit-for-bit round trips and every bad input the foundation
//! must reject (exit code 2, a message naming the file, row and column).
use ringscale::catalog::{read_catalogue, write_catalogue, ColumnMap, OutColumn, RowFilter};
use std::path::Path;
use std::process::Command;

fn bin() -> Command {
    Command::new(env!("CARGO_BIN_EXE_ringscale"))
}

fn awkward_values(n: usize) -> (Vec<f64>, Vec<f64>, Vec<f64>, Vec<f64>) {
    // Values that stress text round trips: many digits, tiny and large magnitudes.
    let ra: Vec<f64> = (0..n)
        .map(|i| (i as f64 * 0.123_456_789_012_345_68) % 360.0)
        .collect();
    let dec: Vec<f64> = (0..n)
        .map(|i| -89.999999 + (i as f64 * 1.000000000000001) % 179.99)
        .collect();
    let z: Vec<f64> = (0..n)
        .map(|i| 1e-9 + (i as f64).sqrt() * 0.01 + 1e-17 * i as f64)
        .collect();
    let w: Vec<f64> = (0..n)
        .map(|i| {
            if i % 7 == 0 {
                0.0
            } else {
                1.0 / (i as f64 + 3.0)
            }
        })
        .collect();
    (ra, dec, z, w)
}

fn round_trip(ext: &str) {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join(format!("cat.{ext}"));
    let (ra, dec, z, w) = awkward_values(1000);
    let cols = [
        OutColumn {
            name: "RA",
            data: &ra,
        },
        OutColumn {
            name: "DEC",
            data: &dec,
        },
        OutColumn {
            name: "Z",
            data: &z,
        },
        OutColumn {
            name: "WEIGHT_FKP",
            data: &w,
        },
    ];
    write_catalogue(&path, &cols, &[("SURVEY".into(), "test".into())]).unwrap();
    let map = ColumnMap::sky("ra", "Dec", "z", vec!["weight_fkp".into()], None);
    let cat = read_catalogue(&path, &map, &RowFilter::default()).unwrap();
    for (a, b) in [
        (&cat.pos[0], &ra),
        (&cat.pos[1], &dec),
        (&cat.pos[2], &z),
        (&cat.w, &w),
    ] {
        assert_eq!(a.len(), b.len());
        for (x, y) in a.iter().zip(b.iter()) {
            assert_eq!(x.to_bits(), y.to_bits());
        }
    }
    // Only the final file is left: no temporary beside it.
    let names: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name())
        .collect();
    assert_eq!(names.len(), 1, "{names:?}");
}

#[test]
fn fits_round_trip_bit_for_bit() {
    round_trip("fits");
}

#[test]
fn csv_round_trip_bit_for_bit() {
    round_trip("csv");
}

#[test]
fn weights_multiply_and_filters_are_counted() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("w.csv");
    std::fs::write(
        &p,
        "\u{feff}# comment line\r\nRA,DEC,Z,W1,W2\r\n10,0,0.5,2,3\r\n370,1,0.8,1,0.5\r\n",
    )
    .unwrap();
    let map = ColumnMap::sky("RA", "DEC", "Z", vec!["W1".into(), "w2".into()], None);
    let cat = read_catalogue(&p, &map, &RowFilter::default()).unwrap();
    assert_eq!(cat.w, vec![6.0, 0.5]);
    assert_eq!(cat.pos[0], vec![10.0, 10.0]); // 370 wrapped
    assert_eq!(cat.ra_wrapped, 1);
    let cat = read_catalogue(
        &p,
        &map,
        &RowFilter {
            z_min: None,
            z_max: Some(0.6),
        },
    )
    .unwrap();
    assert_eq!((cat.len(), cat.rows_filtered), (1, 1));
}

/// Run `inspect` on a file and return (exit code, stderr).
fn inspect(path: &Path, extra: &[&str]) -> (i32, String) {
    let out = bin().arg("inspect").arg(path).args(extra).output().unwrap();
    (
        out.status.code().unwrap_or(-1),
        String::from_utf8_lossy(&out.stderr).into_owned(),
    )
}

fn expect_bad(content: &str, extra: &[&str], fragments: &[&str]) {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("bad.csv");
    std::fs::write(&p, content).unwrap();
    let (code, err) = inspect(&p, extra);
    assert_eq!(code, 2, "stderr: {err}");
    assert!(
        err.contains("bad.csv"),
        "message lacks the file name: {err}"
    );
    for f in fragments {
        assert!(err.contains(f), "message lacks '{f}': {err}");
    }
    assert!(!err.contains("panicked"), "{err}");
}

#[test]
fn missing_column_lists_available() {
    expect_bad(
        "RA,DEC,REDSHIFT\n1,2,0.5\n",
        &[],
        &["'Z'", "available columns: RA, DEC, REDSHIFT"],
    );
}

#[test]
fn nan_and_infinite_values() {
    expect_bad(
        "RA,DEC,Z\n1,2,0.5\n1,nan,0.5\n",
        &[],
        &["row 2", "'DEC'", "finite"],
    );
    expect_bad("RA,DEC,Z\ninf,2,0.5\n", &[], &["row 1", "'RA'", "finite"]);
    expect_bad(
        "RA,DEC,Z,W\n1,2,0.5,inf\n",
        &["--weight-columns", "W"],
        &["row 1", "'W'"],
    );
}

#[test]
fn declination_out_of_range() {
    expect_bad(
        "RA,DEC,Z\n1,2,0.5\n1,2,0.5\n1,-90.5,0.5\n",
        &[],
        &["row 3", "'DEC'", "declination"],
    );
}

#[test]
fn non_positive_redshift() {
    expect_bad("RA,DEC,Z\n1,2,0.0\n", &[], &["row 1", "'Z'", "redshift"]);
    expect_bad(
        "RA,DEC,Z\n1,2,0.3\n1,2,-0.1\n",
        &[],
        &["row 2", "'Z'", "redshift"],
    );
}

#[test]
fn negative_weight() {
    expect_bad(
        "RA,DEC,Z,WSYS\n1,2,0.5,1\n1,2,0.5,-1\n",
        &["--weight-columns", "WSYS"],
        &["row 2", "'WSYS'", "negative weight"],
    );
}

#[test]
fn empty_catalogue() {
    expect_bad("RA,DEC,Z\n", &[], &["empty"]);
    expect_bad("", &[], &["empty"]);
}

#[test]
fn unparsable_field_and_ragged_row() {
    expect_bad("RA,DEC,Z\n1,2,abc\n", &[], &["row 1", "'Z'", "abc"]);
    expect_bad("RA,DEC,Z\n1,2,0.5\n1,2\n", &[], &["line 3", "fields"]);
}

#[test]
fn redshift_beyond_distance_table_is_rejected() {
    // The geometry stage names file and row when z exceeds the fiducial's table.
    use ringscale::cosmology::{Cosmology, DistanceTable};
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("far.csv");
    std::fs::write(&p, "RA,DEC,Z\n1,2,0.5\n1,2,3.5\n").unwrap();
    let cat = read_catalogue(&p, &ColumnMap::default_sky(), &RowFilter::default()).unwrap();
    let t = DistanceTable::new(&Cosmology::planck18(), 3.0).unwrap();
    let e = ringscale::geometry::positions(&cat, Some(&t)).unwrap_err();
    let msg = e.to_string();
    assert_eq!(e.exit_code(), 2);
    assert!(
        msg.contains("far.csv") && msg.contains("row 2") && msg.contains("3.5"),
        "{msg}"
    );
}

#[test]
fn truncated_and_garbage_fits() {
    let dir = tempfile::tempdir().unwrap();
    let good = dir.path().join("good.fits");
    let (ra, dec, z, _) = awkward_values(5000);
    write_catalogue(
        &good,
        &[
            OutColumn {
                name: "RA",
                data: &ra,
            },
            OutColumn {
                name: "DEC",
                data: &dec,
            },
            OutColumn {
                name: "Z",
                data: &z,
            },
        ],
        &[],
    )
    .unwrap();
    let bytes = std::fs::read(&good).unwrap();
    let cut = dir.path().join("cut.fits");
    std::fs::write(&cut, &bytes[..bytes.len() / 2]).unwrap();
    let (code, err) = inspect(&cut, &[]);
    assert_eq!(code, 2, "{err}");
    assert!(
        err.contains("cut.fits") && err.contains("truncated"),
        "{err}"
    );
    let junk = dir.path().join("junk.fits");
    std::fs::write(&junk, vec![b'x'; 6000]).unwrap();
    let (code, err) = inspect(&junk, &[]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("junk.fits"), "{err}");
    let empty = dir.path().join("empty.fits");
    std::fs::write(&empty, b"").unwrap();
    let (code, err) = inspect(&empty, &[]);
    assert_eq!(code, 2, "{err}");
    assert!(err.contains("empty.fits") && err.contains("empty"), "{err}");
}

#[test]
fn inspect_reports_summary() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("ok.csv");
    std::fs::write(&p, "ra,dec,z,w\n10,20,0.5,2\n30,-20,0.6,1\n").unwrap();
    let out = bin()
        .arg("inspect")
        .arg(&p)
        .args(["--weight-columns", "w", "--json"])
        .output()
        .unwrap();
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["rows_used"], 2);
    assert_eq!(v["sum_w"], 3.0);
    assert_eq!(v["sum_w2"], 5.0);
}

#[test]
fn distances_command_shape() {
    let out = bin()
        .args(["distances", "--cosmology", "planck18", "--z", "0.1,0.5,2"])
        .output()
        .unwrap();
    assert!(out.status.success());
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let rows = v["rows"].as_array().unwrap();
    assert_eq!(rows.len(), 3);
    for key in [
        "z",
        "comoving_radial_mpc",
        "comoving_transverse_mpc",
        "angular_diameter_mpc",
        "luminosity_mpc",
        "hubble_distance_mpc",
        "dv_mpc",
    ] {
        assert!(rows[1][key].is_number(), "missing {key}");
    }
    assert!(v["r_d_mpc"].is_number() && v["particle_horizon_mpc"].is_number());
    // Bad inputs: unknown preset, bad redshift list, unknown format.
    for args in [
        vec!["distances", "--cosmology", "nosuch", "--z", "0.1"],
        vec!["distances", "--z", "0.1,x"],
        vec!["distances", "--z", "0.1", "--format", "xml"],
    ] {
        let out = bin().args(&args).output().unwrap();
        assert_eq!(out.status.code(), Some(2), "{args:?}");
    }
    let out = bin()
        .args(["distances", "--z", "0.5", "--format", "ecsv"])
        .output()
        .unwrap();
    assert!(String::from_utf8_lossy(&out.stdout).starts_with("# %ECSV 1.0"));
}
