//! JCAMP-DX files written by this test in each ordinate form (AFFN, SQZ, DIF,
//! DIF+DUP) from the same numbers decode to the same numbers through `import.jcamp`.
//! Encoding rules: McDonald & Wilks, Appl. Spectrosc. 42, 151 (1988), the ASDF
//! compression table (SQZ @A–I a–i, DIF %J–R j–r, DUP S–Z s) and the Y-check rule
//! (a line ending in DIF form is followed by a line opening with its last ordinate).
mod spectral_common;
use spectral_common::*;

/// Ordinates with flat runs, constant-slope ramps, negatives and large values.
fn ordinates() -> Vec<i64> {
    (0..137i64)
        .map(|i| {
            let peak = (1000.0 * (-((i - 60) as f64).powi(2) / 200.0).exp()).round() as i64;
            let ramp = if (90..110).contains(&i) {
                7 * (i - 90)
            } else {
                0
            };
            peak + ramp - 300 + if i > 120 { 12345 } else { 0 }
        })
        .collect()
}

const PER_LINE: usize = 10;

fn lead(v: i64, pos: &[char; 9], neg: &[char; 9], zero: char) -> String {
    let digits = v.unsigned_abs().to_string();
    let first = digits.as_bytes()[0] - b'0';
    let rest = &digits[1..];
    let c = if first == 0 {
        zero
    } else if v < 0 {
        neg[(first - 1) as usize]
    } else {
        pos[(first - 1) as usize]
    };
    format!("{c}{rest}")
}

fn sqz(v: i64) -> String {
    lead(
        v,
        &['A', 'B', 'C', 'D', 'E', 'F', 'G', 'H', 'I'],
        &['a', 'b', 'c', 'd', 'e', 'f', 'g', 'h', 'i'],
        '@',
    )
}

fn dif(v: i64) -> String {
    lead(
        v,
        &['J', 'K', 'L', 'M', 'N', 'O', 'P', 'Q', 'R'],
        &['j', 'k', 'l', 'm', 'n', 'o', 'p', 'q', 'r'],
        '%',
    )
}

fn dup(n: usize) -> String {
    let d = n.to_string();
    let first = d.as_bytes()[0] - b'0';
    let c = ['S', 'T', 'U', 'V', 'W', 'X', 'Y', 'Z', 's'][(first - 1) as usize];
    format!("{c}{}", &d[1..])
}

#[derive(Clone, Copy, PartialEq, Debug)]
enum Form {
    Affn,
    Sqz,
    Dif,
    DifDup,
}

/// The XYDATA body lines. X is written in units of XFACTOR = 0.5, so the abscissa
/// 400 + 0.5·i nm of point i is written as 800 + i.
fn body(y: &[i64], form: Form) -> Vec<String> {
    let x_of = |i: usize| 800 + i as i64;
    let mut lines = Vec::new();
    let mut i = 0;
    let dif_form = matches!(form, Form::Dif | Form::DifDup);
    while i < y.len() {
        // In DIF form each line after the first opens with the Y-check of the previous
        // line's last ordinate, so it starts one point back.
        let start = if dif_form && i > 0 { i - 1 } else { i };
        let end = (start + PER_LINE).min(y.len());
        let chunk = &y[start..end];
        let mut s = format!("{}", x_of(start));
        match form {
            Form::Affn => {
                for v in chunk {
                    s.push_str(&format!(" {v}"));
                }
            }
            Form::Sqz => {
                for v in chunk {
                    s.push_str(&sqz(*v));
                }
            }
            Form::Dif | Form::DifDup => {
                s.push_str(&sqz(chunk[0]));
                let diffs: Vec<i64> = chunk.windows(2).map(|w| w[1] - w[0]).collect();
                let mut k = 0;
                while k < diffs.len() {
                    let mut run = 1;
                    if form == Form::DifDup {
                        while k + run < diffs.len() && diffs[k + run] == diffs[k] {
                            run += 1;
                        }
                    }
                    s.push_str(&dif(diffs[k]));
                    if run > 1 {
                        s.push_str(&dup(run));
                    }
                    k += run;
                }
            }
        }
        lines.push(s);
        i = end;
    }
    if dif_form {
        // Closing Y-check line for the last ordinate.
        let last = y.len() - 1;
        lines.push(format!("{}{}", x_of(last), sqz(y[last])));
    }
    lines
}

fn file_text(y: &[i64], form: Form) -> String {
    let mut t = String::new();
    t.push_str("##TITLE=synthetic test spectrum $$ written by the test\n");
    t.push_str("##JCAMP-DX=5.01\n##DATA TYPE=UV/VIS SPECTRUM\n");
    t.push_str("##XUNITS=NANOMETERS\n##YUNITS=ABSORBANCE\n");
    t.push_str("##XFACTOR=0.5\n##YFACTOR=0.01\n");
    t.push_str(&format!(
        "##FIRSTX=400\n##LASTX={}\n##DELTAX=0.5\n",
        400.0 + 0.5 * (y.len() - 1) as f64
    ));
    t.push_str(&format!("##NPOINTS={}\n", y.len()));
    t.push_str("##XYDATA=(X++(Y..Y))\n");
    for l in body(y, form) {
        t.push_str(&l);
        t.push('\n');
    }
    t.push_str("##END=\n");
    t
}

fn decode(text: &str) -> Result<stages::Artifact, stages::StageError> {
    let f = file("synthetic.jdx", text);
    run("import.jcamp", &[&f], serde_json::json!({}))
}

#[test]
fn every_compression_form_decodes_to_the_same_numbers() {
    let y = ordinates();
    let mut decoded = Vec::new();
    for form in [Form::Affn, Form::Sqz, Form::Dif, Form::DifDup] {
        let text = file_text(&y, form);
        let a = decode(&text).unwrap_or_else(|e| panic!("{form:?}: {e}\n{text}"));
        let s = a.spectrum().unwrap().clone();
        assert_eq!(s.len(), y.len(), "{form:?}");
        for (k, (got, want)) in s.y.iter().zip(&y).enumerate() {
            assert_eq!(*got, *want as f64 * 0.01, "{form:?} point {k}");
        }
        assert_eq!(s.x[0], 400.0);
        assert_eq!(s.x[136], 468.0);
        assert_eq!(s.x_axis, stages::Axis::new("wavelength", "nm"));
        assert_eq!(s.y_axis.quantity, "absorbance");
        decoded.push(s.y);
    }
    assert!(decoded.windows(2).all(|w| w[0] == w[1]));
    // DUP compression really happened (flat tails and the ramp), and SQZ/DIF text
    // contains no separators.
    let t = file_text(&y, Form::DifDup);
    assert!(t.len() < file_text(&y, Form::Dif).len());
    assert!(t.contains('S') || t.contains('T') || t.contains('U'));
}

#[test]
fn corrupted_y_check_is_reported_with_its_line() {
    let y = ordinates();
    let text = file_text(&y, Form::Dif);
    let lines: Vec<&str> = text.lines().collect();
    let first_data = lines
        .iter()
        .position(|l| l.starts_with("##XYDATA"))
        .unwrap()
        + 1;
    // The second data line opens with the Y-check value (SQZ) after its abscissa.
    let target = first_data + 1;
    let line = lines[target];
    let x_end = line.find(|c: char| !c.is_ascii_digit()).unwrap();
    let check_end = x_end
        + 1
        + line[x_end + 1..]
            .find(|c: char| !c.is_ascii_digit())
            .unwrap_or(line.len() - x_end - 1);
    let bad_check = y[PER_LINE - 1] + 1;
    let corrupted = format!("{}{}{}", &line[..x_end], sqz(bad_check), &line[check_end..]);
    let mut out: Vec<String> = lines.iter().map(|s| s.to_string()).collect();
    out[target] = corrupted;
    let e = decode(&(out.join("\n") + "\n")).unwrap_err();
    let line_no = target + 1; // 1-based
    match &e {
        stages::StageError::Data {
            file,
            line,
            message,
        } => {
            assert_eq!(file, "synthetic.jdx");
            assert_eq!(*line, Some(line_no), "{message}");
            assert!(message.contains("Y-check"), "{message}");
        }
        other => panic!("expected a data error, got {other}"),
    }
}

#[test]
fn peak_table_and_xypoints_and_bad_counts() {
    let text = "##TITLE=peaks\n##JCAMP-DX=4.24\n##XUNITS=1/CM\n##YUNITS=TRANSMITTANCE\n##PEAK TABLE=(XY..XY)\n1715.2, 0.12; 2950.0, 0.40\n3400.5,0.80\n##END=\n";
    let a = decode(text).unwrap();
    let s = a.spectrum().unwrap();
    assert_eq!(s.x, vec![1715.2, 2950.0, 3400.5]);
    assert_eq!(s.y, vec![0.12, 0.40, 0.80]);
    assert_eq!(s.x_axis.quantity, "wavenumber");
    // NPOINTS disagreeing with the table is an error that names the XYDATA line.
    let y = ordinates();
    let text = file_text(&y, Form::Sqz).replace("##NPOINTS=137", "##NPOINTS=138");
    let e = decode(&text).unwrap_err().to_string();
    assert!(
        e.contains("synthetic.jdx:12:") && e.contains("NPOINTS"),
        "{e}"
    );
}

#[test]
fn nmr_file_in_hz_converts_to_ppm_with_the_observe_frequency() {
    // JCAMP-DX NMR (Davies & Lampen 1993): XUNITS=HZ with ##.OBSERVE FREQUENCY= in MHz.
    // 2904 Hz at 400 MHz is 7.26 ppm (δ = Δν/ν₀).
    let text = "##TITLE=proton\n##JCAMP-DX=5.01\n##DATA TYPE=NMR SPECTRUM\n##.OBSERVE FREQUENCY=400.0\n##.OBSERVE NUCLEUS=^1H\n##XUNITS=HZ\n##YUNITS=ARBITRARY UNITS\n##FIRSTX=2900\n##LASTX=2908\n##NPOINTS=5\n##XYDATA=(X++(Y..Y))\n2900 1 5 20 5 1\n##END=\n";
    let a = decode(text).unwrap();
    let s = a.spectrum().unwrap();
    assert_eq!(s.metadata["observe_frequency_mhz"], "400");
    let c = run(
        "convert.axis",
        &[&a],
        serde_json::json!({ "to": "chemical_shift" }),
    )
    .unwrap();
    let s = c.spectrum().unwrap();
    assert!((s.x[2] - 7.26).abs() < 1e-12, "{}", s.x[2]);
    assert_eq!(s.x_axis, stages::Axis::new("chemical shift", "ppm"));
}
