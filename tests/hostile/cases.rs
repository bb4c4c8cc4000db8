//! The hostile-input corpus: each function writes its bad (or awkward but valid) input into a
//! folder and says how the binary must react. Files are generated here, never committed.
use ringscale::catalog::{write_catalogue, OutColumn};
use std::ffi::OsString;
use std::path::{Path, PathBuf};

pub enum Expect {
    /// Non-zero exit `code`; stderr holds every fragment; the --out folder stays empty.
    Fail { code: i32, fragments: Vec<String> },
    /// Success; stderr holds every fragment (warnings).
    Ok { fragments: Vec<String> },
}

pub struct Case {
    pub name: String,
    pub args: Vec<OsString>,
    pub env: Vec<(String, String)>,
    pub expect: Expect,
    /// Output folder that must be absent or empty after a failure.
    pub out: Option<PathBuf>,
}

fn fail(code: i32, frags: &[&str]) -> Expect {
    Expect::Fail {
        code,
        fragments: frags.iter().map(|s| s.to_string()).collect(),
    }
}

fn ok(frags: &[&str]) -> Expect {
    Expect::Ok {
        fragments: frags.iter().map(|s| s.to_string()).collect(),
    }
}

/// Small deterministic generator (64-bit LCG, Knuth MMIX constants; value from memory).
struct Lcg(u64);
impl Lcg {
    fn next(&mut self) -> f64 {
        self.0 = self
            .0
            .wrapping_mul(6364136223846793005)
            .wrapping_add(1442695040888963407);
        (self.0 >> 11) as f64 / (1u64 << 53) as f64
    }
}

/// Rows of (RA, Dec, Z, W) uniform in an RA/Dec box and 0.4 <= z < 0.5.
fn rows(n: usize, seed: u64, ra: (f64, f64), dec: (f64, f64)) -> Vec<[String; 4]> {
    let mut g = Lcg(seed);
    (0..n)
        .map(|_| {
            [
                format!("{}", ra.0 + (ra.1 - ra.0) * g.next()),
                format!("{}", dec.0 + (dec.1 - dec.0) * g.next()),
                format!("{}", 0.4 + 0.1 * g.next()),
                format!("{}", 0.5 + g.next()),
            ]
        })
        .collect()
}

fn csv_text(header: &str, rows: &[[String; 4]]) -> String {
    let mut s = format!("{header}\n");
    for r in rows {
        s.push_str(&r.join(","));
        s.push('\n');
    }
    s
}

fn write(dir: &Path, name: &str, content: impl AsRef<[u8]>) -> PathBuf {
    let p = dir.join(name);
    std::fs::write(&p, content).unwrap();
    p
}

/// A matching galaxy (200) and random (2000) catalogue pair on RA 150-160, Dec 0-10.
pub fn good_pair(dir: &Path) -> (PathBuf, PathBuf) {
    let g = write(
        dir,
        "good_gal.csv",
        csv_text("RA,DEC,Z,W", &rows(200, 1, (150.0, 160.0), (0.0, 10.0))),
    );
    let r = write(
        dir,
        "good_ran.csv",
        csv_text("RA,DEC,Z,W", &rows(2000, 2, (150.0, 160.0), (0.0, 10.0))),
    );
    (g, r)
}

/// Galaxy CSV with one field replaced: row `row` (1-based), column `col` (0 RA .. 3 W).
fn galaxies_with(dir: &Path, name: &str, row: usize, col: usize, value: &str) -> PathBuf {
    let mut rs = rows(50, 7, (150.0, 160.0), (0.0, 10.0));
    rs[row - 1][col] = value.to_string();
    write(dir, name, csv_text("RA,DEC,Z,W", &rs))
}

struct Ctx<'a> {
    dir: &'a Path,
    randoms: PathBuf,
    cases: Vec<Case>,
}

impl Ctx<'_> {
    /// A `count` of `data` against the good randoms, with extra options.
    fn count(&mut self, name: &str, data: &Path, extra: &[&str], expect: Expect) {
        let out = self.dir.join(format!("out_{name}"));
        let mut args: Vec<OsString> = ["count", "--cosmology", "planck18", "--edges", "0:40:4"]
            .iter()
            .map(OsString::from)
            .collect();
        args.extend(["--threads", "1", "--data"].map(OsString::from));
        args.push(data.into());
        args.push("--randoms".into());
        args.push(self.randoms.clone().into());
        args.push("--out".into());
        args.push(out.clone().into());
        args.extend(extra.iter().map(OsString::from));
        self.push(name, args, vec![], expect, Some(out));
    }
    /// Replace the `--edges` value of the last case.
    fn set_edges(&mut self, spec: &str) {
        let last = self.cases.last_mut().unwrap();
        let i = last.args.iter().position(|a| a == "--edges").unwrap();
        last.args[i + 1] = spec.into();
    }
    fn push(
        &mut self,
        name: &str,
        args: Vec<OsString>,
        env: Vec<(String, String)>,
        expect: Expect,
        out: Option<PathBuf>,
    ) {
        self.cases.push(Case {
            name: name.to_string(),
            args,
            env,
            expect,
            out,
        });
    }
}

fn os(v: &[&str]) -> Vec<OsString> {
    v.iter().map(OsString::from).collect()
}

fn fits_with_columns(path: &Path, cols: &[(&str, fitsio::tables::ColumnDataType)], n: usize) {
    use fitsio::tables::{ColumnDataType as T, ColumnDescription};
    let mut f = fitsio::FitsFile::create(path).open().unwrap();
    let descs: Vec<_> = cols
        .iter()
        .map(|(name, t)| {
            let mut d = ColumnDescription::new(*name);
            d.with_type(*t);
            if matches!(t, T::String) {
                d.that_repeats(8);
            }
            d.create().unwrap()
        })
        .collect();
    let hdu = f.create_table("CATALOG", &descs).unwrap();
    for (k, (name, t)) in cols.iter().enumerate() {
        match t {
            T::Int => {
                let v: Vec<i32> = (0..n as i32).map(|i| 150 + i % 10).collect();
                hdu.write_col(&mut f, *name, &v).unwrap();
            }
            T::String => {
                let v: Vec<String> = (0..n).map(|i| format!("z{i}")).collect();
                hdu.write_col(&mut f, *name, &v).unwrap();
            }
            _ => {
                let v: Vec<f64> = (0..n)
                    .map(|i| if k == 1 { (i % 10) as f64 } else { 0.45 })
                    .collect();
                hdu.write_col(&mut f, *name, &v).unwrap();
            }
        }
    }
}

fn good_fits(path: &Path, n: usize, nan_in: Option<usize>) {
    let rs = rows(n, 3, (150.0, 160.0), (0.0, 10.0));
    let mut cols: Vec<Vec<f64>> = (0..4)
        .map(|k| rs.iter().map(|r| r[k].parse().unwrap()).collect())
        .collect();
    if let Some(k) = nan_in {
        cols[k][n / 2] = f64::NAN;
    }
    let names = ["RA", "DEC", "Z", "W"];
    let oc: Vec<OutColumn> = names
        .iter()
        .zip(&cols)
        .map(|(name, data)| OutColumn { name, data })
        .collect();
    write_catalogue(path, &oc, &[]).unwrap();
}

/// Replace the value of header card `key` (first occurrence after byte `from`) in FITS bytes.
fn patch_card(bytes: &mut [u8], from: usize, key: &str, value: &str) {
    let k = format!("{key:<8}= ");
    let pos = (from..bytes.len() - 80)
        .step_by(80)
        .find(|&i| bytes[i..i + 10] == *k.as_bytes())
        .expect("card not found");
    let v = format!("{value:>20}");
    bytes[pos + 10..pos + 30].copy_from_slice(v.as_bytes());
}

fn is_root() -> bool {
    std::process::Command::new("id")
        .arg("-u")
        .output()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim() == "0")
        .unwrap_or(false)
}

/// The whole corpus, generated under `dir`.
pub fn all(dir: &Path) -> Vec<Case> {
    use fitsio::tables::ColumnDataType as T;
    let (good, randoms) = good_pair(dir);
    let mut c = Ctx {
        dir,
        randoms: randoms.clone(),
        cases: Vec::new(),
    };
    let w = ["--weight-columns", "W"];

    // Non-finite values in every column (NaN, +inf, -inf), the weight read as a weight.
    for (col, cname) in ["RA", "DEC", "Z", "W"].iter().enumerate() {
        for (tag, v) in [("nan", "nan"), ("inf", "inf"), ("neginf", "-inf")] {
            let name = format!("{tag}_{cname}.csv");
            let p = galaxies_with(dir, &name, 3, col, v);
            let col_frag = format!("column '{cname}'");
            c.count(
                &format!("{tag}_{cname}"),
                &p,
                &w,
                fail(2, &[&name, "row 3", &col_frag, "finite"]),
            );
        }
    }
    // Out-of-range values.
    for (case, col, v, what) in [
        ("dec_above_90", 1, "90.0001", "declination"),
        ("dec_below_-90", 1, "-95", "declination"),
        ("z_zero", 2, "0", "redshift must be > 0"),
        ("z_negative", 2, "-0.2", "redshift must be > 0"),
        ("weight_negative", 3, "-1e-3", "negative weight"),
    ] {
        let name = format!("{case}.csv");
        let p = galaxies_with(dir, &name, 5, col, v);
        c.count(case, &p, &w, fail(2, &[&name, "row 5", what]));
    }
    // All weights zero.
    let mut rs = rows(20, 9, (150.0, 160.0), (0.0, 10.0));
    for r in &mut rs {
        r[3] = "0".into();
    }
    let p = write(dir, "zero_w.csv", csv_text("RA,DEC,Z,W", &rs));
    c.count(
        "all_zero_weights",
        &p,
        &w,
        fail(2, &["zero_w.csv", "all weights are zero"]),
    );
    // Empty and header-only files, ragged rows, unreadable text.
    let p = write(dir, "empty.csv", "");
    c.count("empty_csv", &p, &[], fail(2, &["empty.csv", "empty"]));
    let p = write(dir, "header_only.csv", "RA,DEC,Z\n");
    c.count(
        "header_only_csv",
        &p,
        &[],
        fail(2, &["header_only.csv", "empty"]),
    );
    let p = write(
        dir,
        "ragged.csv",
        "RA,DEC,Z\n150,1,0.4\n151,2\n152,3,0.45\n",
    );
    c.count(
        "ragged_row",
        &p,
        &[],
        fail(2, &["ragged.csv", "line 3", "2 fields", "header has 3"]),
    );
    let p = write(dir, "dupcol.csv", "RA,DEC,Z,ra\n150,1,0.4,3\n");
    c.count(
        "duplicated_csv_column",
        &p,
        &[],
        fail(2, &["dupcol.csv", "duplicated column name"]),
    );
    let p = write(dir, "words.csv", "RA,DEC,Z\n150,1,0.4\n150,1,near\n");
    c.count(
        "unparsable_number",
        &p,
        &[],
        fail(2, &["words.csv", "row 2", "column 'Z'", "near"]),
    );
    let p = write(dir, "latin1.csv", b"RA,DEC,Z\n150,1,0.4\n150,\xe9,0.4\n");
    c.count(
        "not_utf8",
        &p,
        &[],
        fail(2, &["latin1.csv", "line 3", "UTF-8"]),
    );
    let p = write(dir, "nocol.csv", "RA,DEC,REDSHIFT\n150,1,0.4\n");
    c.count(
        "missing_column",
        &p,
        &[],
        fail(2, &["nocol.csv", "'Z'", "available columns"]),
    );
    let p = write(
        dir,
        "region.csv",
        "RA,DEC,Z,REG\n150,1,0.4,1\n151,1,0.4,1.5\n",
    );
    c.count(
        "fractional_region",
        &p,
        &["--region-column", "REG"],
        fail(2, &["region.csv", "row 2", "'REG'", "region label"]),
    );
    let p = write(dir, "cat.parquet", "x");
    c.count(
        "unknown_format",
        &p,
        &[],
        fail(2, &["cat.parquet", "unknown catalogue format"]),
    );
    c.count(
        "missing_file",
        &dir.join("nosuch.csv"),
        &[],
        fail(2, &["nosuch.csv", "cannot open"]),
    );
    // A bad random catalogue is named as such.
    let bad_r = galaxies_with(dir, "bad_randoms.csv", 4, 1, "91");
    let out = dir.join("out_bad_randoms");
    let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
    args.extend([
        "--data".into(),
        good.clone().into(),
        "--randoms".into(),
        bad_r.into(),
        "--out".into(),
        out.clone().into(),
    ]);
    c.push(
        "bad_randoms",
        args,
        vec![],
        fail(2, &["bad_randoms.csv", "row 4", "declination"]),
        Some(out),
    );

    // FITS: truncated, garbage, empty, image only, string and duplicated columns, NaN, huge NAXIS2.
    let fgood = dir.join("good.fits");
    good_fits(&fgood, 3000, None);
    let bytes = std::fs::read(&fgood).unwrap();
    let p = write(dir, "cut.fits", &bytes[..bytes.len() - 2880 - 100]);
    c.count(
        "fits_truncated",
        &p,
        &[],
        fail(2, &["cut.fits", "truncated"]),
    );
    let p = write(dir, "short.fits", &bytes[..1000]);
    c.count(
        "fits_shorter_than_a_block",
        &p,
        &[],
        fail(2, &["short.fits", "truncated"]),
    );
    let p = write(dir, "junk.fits", vec![b'#'; 5760]);
    c.count("fits_garbage", &p, &[], fail(2, &["junk.fits", "FITS"]));
    let p = write(dir, "empty.fits", "");
    c.count("fits_empty", &p, &[], fail(2, &["empty.fits", "empty"]));
    let p = dir.join("image.fits");
    {
        let mut f = fitsio::FitsFile::create(&p).open().unwrap();
        let d = fitsio::images::ImageDescription {
            data_type: fitsio::images::ImageType::Float,
            dimensions: &[4, 4],
        };
        f.create_image("IMG", &d).unwrap();
    }
    c.count(
        "fits_image_only",
        &p,
        &[],
        fail(2, &["image.fits", "no table extension"]),
    );
    let p = dir.join("strz.fits");
    fits_with_columns(
        &p,
        &[("RA", T::Double), ("DEC", T::Double), ("Z", T::String)],
        5,
    );
    c.count(
        "fits_string_redshift",
        &p,
        &[],
        fail(2, &["strz.fits", "column 'Z'", "numeric column is needed"]),
    );
    let p = dir.join("dup.fits");
    fits_with_columns(
        &p,
        &[
            ("RA", T::Double),
            ("DEC", T::Double),
            ("Z", T::Double),
            ("DUPX", T::Double),
        ],
        5,
    );
    // cfitsio refuses to write a second column matching 'RA', so rename it in the header bytes.
    let mut b = std::fs::read(&p).unwrap();
    let at = b.windows(5).position(|w| w == b"'DUPX").unwrap();
    b[at..at + 5].copy_from_slice(b"'ra  ");
    std::fs::write(&p, b).unwrap();
    c.count(
        "fits_duplicated_column",
        &p,
        &[],
        fail(2, &["dup.fits", "duplicated column name"]),
    );
    for (k, cname) in ["RA", "DEC", "Z", "W"].iter().enumerate() {
        let name = format!("nan_{cname}.fits");
        let p = dir.join(&name);
        good_fits(&p, 100, Some(k));
        let col_frag = format!("column '{cname}'");
        c.count(
            &format!("fits_nan_{cname}"),
            &p,
            &w,
            fail(2, &[&name, "row 51", &col_frag, "finite"]),
        );
    }
    // A header claiming 2^40 rows: must be refused before any allocation.
    let mut huge = bytes.clone();
    patch_card(&mut huge, 2880, "NAXIS2", &(1u64 << 40).to_string());
    let p = write(dir, "huge.fits", &huge);
    c.count(
        "fits_2pow40_rows",
        &p,
        &[],
        fail(2, &["huge.fits", "1099511627776 rows", "truncated"]),
    );

    // Fuzzer finding (fits_reader): bytes inserted into the table header misalign every card
    // after it; cfitsio then attempts a multi-petabyte allocation, which fails cleanly in a
    // normal build (AddressSanitizer aborts on it instead). Must stay an input error.
    let mut shifted = bytes.clone();
    let at = (2880..5760)
        .step_by(80)
        .find(|&i| shifted[i..].starts_with(b"PCOUNT  ="))
        .unwrap();
    shifted.splice(at..at, [0xe2u8; 33]);
    shifted.truncate(bytes.len() - 1291);
    let p = write(dir, "misaligned.fits", &shifted);
    c.count(
        "fits_misaligned_header",
        &p,
        &[],
        fail(2, &["misaligned.fits"]),
    );

    // Cosmology TOML files.
    for (case, text, frag) in [
        (
            "cosmo_closed_e2_negative",
            "h = 0.7\nomega_k = -3.0\n",
            "E(z)^2",
        ),
        (
            "cosmo_negative_density",
            "omega_c_h2 = -0.1\n",
            "omega_c_h2",
        ),
        (
            "cosmo_negative_baryons",
            "omega_b_h2 = -0.01\n",
            "omega_b_h2",
        ),
        (
            "cosmo_unknown_key",
            "h = 0.7\nomega_lambda = 0.7\n",
            "omega_lambda",
        ),
        ("cosmo_wrong_type", "h = \"fast\"\n", "h"),
        ("cosmo_not_toml", "h = = 0.7\n[[[", "invalid cosmology TOML"),
    ] {
        let name = format!("{case}.toml");
        let t = write(dir, &name, text);
        let out = dir.join(format!("out_{case}"));
        let mut args = os(&["count", "--edges", "0:40:4", "--cosmology"]);
        args.extend([
            t.into(),
            "--data".into(),
            good.clone().into(),
            "--randoms".into(),
            randoms.clone().into(),
            "--out".into(),
            out.clone().into(),
        ]);
        c.push(case, args, vec![], fail(2, &[&name, frag]), Some(out));
    }
    let t = write(dir, "distances_bad.toml", "h = 0.7\nomega_k = -3.0\n");
    let mut args = os(&["distances", "--z", "0.5", "--cosmology"]);
    args.push(t.into());
    c.push(
        "distances_impossible_cosmology",
        args,
        vec![],
        fail(2, &["distances_bad.toml", "unphysical"]),
        None,
    );

    // Options.
    c.count("edges_reversed", &good, &[], fail(2, &["edges '50:10:4'"]));
    c.set_edges("50:10:4");
    c.count(
        "shard_out_of_range",
        &good,
        &["--shard", "3/2"],
        fail(2, &["--shard '3/2'"]),
    );
    c.count(
        "rr_splits_zero",
        &good,
        &["--rr-splits", "0"],
        fail(2, &["--rr-splits"]),
    );
    c.count(
        "max_memory_tiny",
        &good,
        &["--max-memory", "0.001"],
        fail(3, &["--max-memory"]),
    );

    // Output folders that cannot be written.
    let file_parent = write(dir, "plainfile", "x");
    let out = file_parent.join("counts");
    let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
    args.extend([
        "--data".into(),
        good.clone().into(),
        "--out".into(),
        out.clone().into(),
    ]);
    c.push(
        "out_parent_is_a_file",
        args,
        vec![],
        fail(2, &["plainfile/counts", "cannot create output folder"]),
        Some(out),
    );
    if !is_root() {
        // chmod does not stop root; the full-disk cases below cover exit 3 for root.
        use std::os::unix::fs::PermissionsExt;
        let ro = dir.join("readonly");
        std::fs::create_dir(&ro).unwrap();
        std::fs::set_permissions(&ro, std::fs::Permissions::from_mode(0o555)).unwrap();
        let out = ro.join("counts");
        let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
        args.extend([
            "--data".into(),
            good.clone().into(),
            "--out".into(),
            out.clone().into(),
        ]);
        c.push(
            "out_not_writable",
            args,
            vec![],
            fail(3, &["readonly/counts"]),
            Some(out),
        );
    }
    // Full disk, simulated after N bytes: early (first file) and late (last files).
    for (case, bytes) in [("disk_full_first_file", "10"), ("disk_full_late", "9000")] {
        let out = dir.join(format!("out_{case}"));
        let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
        args.extend(["--data".into(), good.clone().into()]);
        args.extend(["--randoms".into(), randoms.clone().into()]);
        args.extend(["--out".into(), out.clone().into()]);
        c.push(
            case,
            args,
            vec![("RINGSCALE_TEST_FAIL_WRITE_AFTER_BYTES".into(), bytes.into())],
            fail(3, &[&format!("out_{case}/"), "No space left"]),
            Some(out),
        );
    }
    // Free-space guard (`report::space`): the output would not fit in the free bytes reported
    // by the test hook, so the command stops with exit 3 before writing any file.
    let out = dir.join("out_count_no_room");
    let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
    args.extend(["--data".into(), good.clone().into()]);
    args.extend(["--randoms".into(), randoms.clone().into()]);
    args.extend(["--out".into(), out.clone().into()]);
    c.push(
        "count_output_would_not_fit",
        args,
        vec![("RINGSCALE_TEST_FREE_BYTES".into(), "4096".into())],
        fail(
            3,
            &[
                "/out_count_no_room: not enough free disk space",
                "4096 available",
            ],
        ),
        Some(out),
    );
    let out = dir.join("out_mock_no_room");
    std::fs::create_dir(&out).unwrap();
    let mut args = os(&["mock", "box", "--n-grid", "16", "--box", "200"]);
    args.extend(["--nbar".into(), "0.001".into()]);
    args.extend(["--out".into(), out.join("box.fits").into()]);
    c.push(
        "mock_output_would_not_fit",
        args,
        vec![("RINGSCALE_TEST_FREE_BYTES".into(), "20000".into())],
        fail(
            3,
            &[
                "/out_mock_no_room: not enough free disk space",
                "20000 available",
            ],
        ),
        Some(out),
    );
    // Downstream commands on garbage.
    let junk_counts = dir.join("junk_counts");
    std::fs::create_dir(&junk_counts).unwrap();
    write(&junk_counts, "dd.state.json", "{\"pairing\": 3}");
    let out = dir.join("out_xi_junk");
    let mut args = os(&["xi", "--counts"]);
    args.extend([junk_counts.into(), "--out".into(), out.clone().into()]);
    c.push(
        "xi_on_junk_state",
        args,
        vec![],
        fail(2, &["dd.state.json", "not a ringscale count state"]),
        Some(out),
    );
    let pri = write(
        dir,
        "priors_typo.toml",
        "[rd]\nmean = 147.09\nsgima = 0.26\n",
    );
    let bao = write(dir, "bao.txt", "0.5 13.0 0.2\n");
    let out = dir.join("out_priors");
    let mut args = os(&["curvature", "--bao"]);
    args.extend([
        bao.into(),
        "--priors".into(),
        pri.into(),
        "--out".into(),
        out.clone().into(),
    ]);
    c.push(
        "priors_unknown_key",
        args,
        vec![],
        fail(2, &["priors_typo.toml", "sgima"]),
        Some(out),
    );

    // Positive cases: awkward but valid input is accepted.
    let mut text = String::from("\u{feff}# survey: test\r\n# another comment\r\nRA,DEC,Z,W\r\n");
    for r in rows(200, 1, (150.0, 160.0), (0.0, 10.0)) {
        text.push_str(&r.join(","));
        text.push_str("\r\n");
        text.push_str("# interleaved comment\r\n");
    }
    let p = write(dir, "bom_crlf_comments.csv", text);
    c.count("accept_bom_crlf_comments", &p, &w, ok(&["memory estimate"]));
    // Integer RA (any numeric FITS type is accepted for positions).
    let p = dir.join("int_ra.fits");
    fits_with_columns(
        &p,
        &[("RA", T::Int), ("DEC", T::Double), ("Z", T::Double)],
        50,
    );
    c.count("accept_integer_ra_fits", &p, &[], ok(&[]));
    // Randoms on a different patch: half the galaxies are uncovered.
    let half = write(
        dir,
        "half_randoms.csv",
        csv_text("RA,DEC,Z,W", &rows(4000, 5, (155.0, 165.0), (0.0, 10.0))),
    );
    let out = dir.join("out_half");
    let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
    args.extend(["--data".into(), good.clone().into()]);
    args.extend(["--randoms".into(), half.into(), "--out".into(), out.into()]);
    c.push(
        "warn_randoms_do_not_cover",
        args,
        vec![],
        ok(&["warning:", "of the galaxies", "hold no randoms"]),
        None,
    );
    // Fewer randoms than galaxies.
    let few = write(
        dir,
        "few_randoms.csv",
        csv_text("RA,DEC,Z,W", &rows(50, 6, (150.0, 160.0), (0.0, 10.0))),
    );
    let out = dir.join("out_few");
    let mut args = os(&["count", "--cosmology", "planck18", "--edges", "0:40:4"]);
    args.extend(["--data".into(), good.clone().into()]);
    args.extend(["--randoms".into(), few.into(), "--out".into(), out.into()]);
    c.push(
        "warn_fewer_randoms",
        args,
        vec![],
        ok(&["warning: fewer randoms (50) than galaxies (200)"]),
        None,
    );
    // s_max far beyond the catalogues' extent.
    c.count(
        "warn_s_max_beyond_extent",
        &good,
        &[],
        ok(&["warning: s_max = 5000", "exceeds the largest separation"]),
    );
    c.set_edges("0:5000:5");
    c.cases
}
