//! An invented run for the report tests: three included recipes (photoelectron
//! fits, optical band gap with a calibration, particle sizing), a failed node with
//! a skipped dependent, a passing and a failing check and a sample whose name is
//! markup. Every number here is invented for rendering; none is a reference value.
//! The citations are written from memory and serve only as text to render.

#![allow(dead_code)]

use engine::record::*;
use stages::*;
use std::collections::{BTreeMap, HashMap};

pub const EVIL: &str = "<script>alert(1)</script>";

/// Deterministic pseudo-noise in [-1, 1] (no RNG needed for a rendering fixture).
fn wobble(i: usize) -> f64 {
    ((i as f64 * 12.9898).sin() * 43758.5453).fract()
}

fn gauss(x: f64, c: f64, w: f64, a: f64) -> f64 {
    a * (-(x - c).powi(2) / (2.0 * w * w)).exp()
}

fn step(
    recipe: &str,
    id: &str,
    stage: &str,
    methods: &str,
    refs: &[(&str, &str)],
    inputs: &[&str],
    gathers: bool,
) -> StepRecord {
    StepRecord {
        id: id.into(),
        recipe: recipe.into(),
        stage: stage.into(),
        stage_version: 1,
        options: serde_json::json!({ "note": format!("options of {id}"), "window": 5 }),
        methods: methods.into(),
        references: refs
            .iter()
            .map(|(k, c)| ReferenceRecord {
                key: k.to_string(),
                citation: c.to_string(),
            })
            .collect(),
        output_kind: "spectrum".into(),
        inputs: inputs.iter().map(|s| s.to_string()).collect(),
        gathers,
    }
}

pub struct Fixture {
    pub record: RunRecord,
    pub artifacts: HashMap<String, Artifact>,
}

impl Fixture {
    pub fn source(&self) -> impl Fn(&str) -> Option<Artifact> + '_ {
        move |k: &str| self.artifacts.get(k).cloned()
    }
}

struct Builder {
    nodes: Vec<NodeRecord>,
    artifacts: HashMap<String, Artifact>,
}

impl Builder {
    fn add(
        &mut self,
        recipe: &str,
        step: &str,
        item: Option<&str>,
        status: NodeStatus,
        upstream: &[String],
        art: Option<Artifact>,
    ) -> String {
        let key = format!(
            "{:016x}",
            blake3_like(&format!("{recipe}/{step}/{}", item.unwrap_or("")))
        );
        let files = if upstream.is_empty() {
            vec![FileRecord {
                path: format!("data/{}.csv", item.unwrap_or(step)),
                hash: format!("{:064x}", blake3_like(item.unwrap_or(step)) as u128),
                bytes: 4096,
            }]
        } else {
            Vec::new()
        };
        self.nodes.push(NodeRecord {
            step: step.into(),
            recipe: recipe.into(),
            item: item.map(String::from),
            key: key.clone(),
            status,
            files,
            upstream: upstream.to_vec(),
            duration_ms: 1.5,
        });
        if let Some(a) = art {
            self.artifacts.insert(key.clone(), a);
        }
        key
    }
}

/// FNV-1a: a stable stand-in for the engine's content hashes.
fn blake3_like(s: &str) -> u64 {
    let mut h: u64 = 0xcbf29ce484222325;
    for b in s.bytes() {
        h ^= u64::from(b);
        h = h.wrapping_mul(0x100000001b3);
    }
    h
}

fn c1s(n: usize, shift: f64) -> (Vec<f64>, Vec<f64>, Vec<[f64; 3]>, Vec<f64>) {
    let x: Vec<f64> = (0..n)
        .map(|i| 295.0 - 15.0 * i as f64 / (n - 1) as f64)
        .collect();
    let mut comps = Vec::new();
    let mut bg = Vec::new();
    let mut y = Vec::new();
    for (i, &e) in x.iter().enumerate() {
        let c = [
            gauss(e, 284.8 + shift, 0.6, 1000.0),
            gauss(e, 286.3 + shift, 0.6, 300.0),
            gauss(e, 288.9 + shift, 0.6, 120.0),
        ];
        let b = 200.0 + 150.0 / (1.0 + ((e - 285.5) / 0.8).exp());
        comps.push(c);
        bg.push(b);
        y.push(b + c.iter().sum::<f64>() + 12.0 * wobble(i));
    }
    (x, y, comps, bg)
}

/// One photoelectron item: import, Shirley background and a three-component fit.
/// Returns the fit node's key.
fn add_c1s_item(b: &mut Builder, r: &str, item: &str, k: usize, n: usize) -> String {
    let be = Axis::new("binding energy", "eV");
    let counts = Axis::new("intensity", "counts");
    let (x, y, comps, bg) = c1s(n, 0.1 * k as f64);
    let raw = Spectrum::new(x.clone(), y.clone(), be.clone(), counts.clone());
    let kr = b.add(
        r,
        "raw",
        Some(item),
        NodeStatus::Ran,
        &[],
        Some(Artifact::new(Value::Spectrum(raw.clone()))),
    );
    let mut with_bg = raw.clone();
    with_bg.curves.push(Curve {
        name: "Shirley background".into(),
        role: CurveRole::Background,
        y: bg.clone(),
    });
    let kb = b.add(
        r,
        "bg",
        Some(item),
        NodeStatus::Cached,
        &[kr],
        Some(Artifact::new(Value::Spectrum(with_bg.clone()))),
    );
    let mut fitted = with_bg.clone();
    let names = ["cc", "co", "oco"];
    for (j, name) in names.iter().enumerate() {
        fitted.curves.push(Curve {
            name: format!("{name} component"),
            role: CurveRole::Component,
            y: comps.iter().zip(&bg).map(|(c, b)| c[j] + b).collect(),
        });
    }
    let env: Vec<f64> = comps
        .iter()
        .zip(&bg)
        .map(|(c, b)| c.iter().sum::<f64>() + b)
        .collect();
    fitted.curves.push(Curve {
        name: "envelope".into(),
        role: CurveRole::Envelope,
        y: env.clone(),
    });
    fitted.curves.push(Curve {
        name: "residual".into(),
        role: CurveRole::Residual,
        y: y.iter().zip(&env).map(|(a, e)| a - e).collect(),
    });
    let m = |v: f64, u: f64, unit: &str| Measurement::new(v, Some(u), unit);
    let peaks: Vec<FittedPeak> = names
        .iter()
        .enumerate()
        .map(|(j, name)| FittedPeak {
            name: name.to_string(),
            shape: "pseudo_voigt".into(),
            center: m([284.8, 286.3, 288.9][j] + 0.1 * k as f64, 0.0123, "eV"),
            area: m(
                [1504.0, 451.2, 180.5][j],
                [12.3456, 9.87, 7.1][j],
                "counts eV",
            ),
            fwhm: m(1.4128, 0.0213, "eV"),
            height: m([1000.0, 300.0, 120.0][j], 8.0, "counts"),
        })
        .collect();
    let fit = FitResult {
        model: "3 pseudo-Voigt peaks + Shirley background".into(),
        parameters: vec![
            FitParameter {
                name: "cc.center".into(),
                value: 284.8 + 0.1 * k as f64,
                stderr: Some(0.0123),
                unit: "eV".into(),
                status: ParameterStatus::Free,
            },
            FitParameter {
                name: "co.fwhm".into(),
                value: 1.4128,
                stderr: None,
                unit: "eV".into(),
                status: ParameterStatus::Tied("cc.fwhm".into()),
            },
            FitParameter {
                name: "oco.eta".into(),
                value: 1.0,
                stderr: None,
                unit: String::new(),
                status: ParameterStatus::AtBound,
            },
        ],
        correlation: vec![],
        peaks,
        area_covariance: vec![],
        spectrum: fitted,
        statistics: FitStatistics {
            chi_square: 312.4567,
            reduced_chi_square: 1.0623,
            r_squared: 0.998712,
            points: n,
            free_parameters: 7,
            iterations: 14,
            converged: true,
            reason: "relative reduction of χ² below 1e-10".into(),
            weighted: true,
        },
    };
    let mut art = Artifact::new(Value::Fit(fit)).with_results(vec![
        Record::number("fraction.cc", 0.70 - 0.02 * k as f64, Some(0.012345), ""),
        Record::number("cc.center", 284.8 + 0.1 * k as f64, Some(0.0123), "eV"),
        Record::text("converged", "yes"),
    ]);
    if k == 1 {
        art.warn("reduced χ² = 1.9 is far from 1: the model or the weights may not suit the data");
    }
    b.add(r, "envelope", Some(item), NodeStatus::Ran, &[kb], Some(art))
}

/// The photoelectron steps of recipe `c1s-fits`.
fn c1s_steps() -> Vec<StepRecord> {
    let mut steps = Vec::new();
    let refs_shirley = [("shirley1972", "D. A. Shirley, High-resolution X-ray photoemission spectrum of the valence bands of gold, Phys. Rev. B 5 (1972) 4709-4714.")];
    let refs_fit = [
        ("wertheim1974", "G. K. Wertheim, M. A. Butler, K. W. West, D. N. E. Buchanan, Determination of the Gaussian and Lorentzian content of experimental line shapes, Rev. Sci. Instrum. 45 (1974) 1369-1371."),
        ("more1978", "J. J. Moré, The Levenberg-Marquardt algorithm: implementation and theory, in: Numerical Analysis, Lect. Notes Math. 630, Springer, 1978, pp. 105-116."),
    ];
    steps.push(step("c1s-fits", "raw", "import.delimited", "spectra were read from comma-separated text files, taking binding energy (eV) from column 1 and intensity (counts) from column 2", &[], &["samples:c1s"], false));
    steps.push(step("c1s-fits", "bg", "background.shirley", "A Shirley background [shirley1972] was computed between 281.0 and 292.0 eV, iterated until the background changed by less than 10⁻⁶ of the step height (at most 50 iterations).", &refs_shirley, &["raw"], false));
    steps.push(step("c1s-fits", "envelope", "fit.peaks", "The envelope was fitted with three pseudo-Voigt components [wertheim1974] on top of the background by Levenberg–Marquardt least squares [more1978], weighting each point by its Poisson uncertainty, with all widths tied to that of the C–C component.", &refs_fit, &["bg"], false));
    steps.push(step(
        "c1s-fits",
        "table",
        "gather.table",
        "Results were collected into one table with a row per sample.",
        &[],
        &["envelope"],
        true,
    ));
    steps
}

/// A run over `n` photoelectron spectra of 2,000 points each (import, background,
/// fit, gathered table) for the report benchmark.
pub fn many(n: usize) -> Fixture {
    let mut b = Builder {
        nodes: Vec::new(),
        artifacts: HashMap::new(),
    };
    let r = "c1s-fits";
    let keys: Vec<String> = (0..n)
        .map(|k| add_c1s_item(&mut b, r, &format!("film_{k:04}"), k % 5, 2000))
        .collect();
    let table = Table {
        title: "fractions".into(),
        columns: vec![Column {
            name: "fraction.cc".into(),
            unit: String::new(),
            data: ColumnData::Number {
                values: (0..n).map(|k| 0.7 - 0.001 * k as f64).collect(),
                uncertainty: Some(vec![0.012; n]),
            },
        }],
    };
    b.add(
        r,
        "table",
        None,
        NodeStatus::Ran,
        &keys,
        Some(Artifact::new(Value::Table(table))),
    );
    let mut record = fixture().record;
    record.recipes.truncate(2);
    record.recipes.remove(0);
    record.steps = c1s_steps();
    record.nodes = b.nodes;
    record.checks.truncate(1);
    Fixture {
        record,
        artifacts: b.artifacts,
    }
}

pub fn fixture() -> Fixture {
    let mut b = Builder {
        nodes: Vec::new(),
        artifacts: HashMap::new(),
    };
    let mut steps = Vec::new();

    // Recipe 1: photoelectron spectra.
    let r = "c1s-fits";
    steps.extend(c1s_steps());
    let mut fit_keys = Vec::new();
    for (k, item) in ["film_a", "film_b", EVIL].iter().enumerate() {
        let n = if k == 0 { 4000 } else { 301 };
        fit_keys.push(add_c1s_item(&mut b, r, item, k, n));
    }
    let table = Table {
        title: "C 1s component fractions".into(),
        columns: vec![
            Column {
                name: "item".into(),
                unit: String::new(),
                data: ColumnData::Text(vec!["film_a".into(), "film_b".into(), EVIL.into()]),
            },
            Column {
                name: "fraction.cc".into(),
                unit: String::new(),
                data: ColumnData::Number {
                    values: vec![0.70, 0.68, 0.66],
                    uncertainty: Some(vec![0.012345, 0.0111, 0.0154]),
                },
            },
            Column {
                name: "cc.center".into(),
                unit: "eV".into(),
                data: ColumnData::Number {
                    values: vec![284.8, 284.9, 285.0],
                    uncertainty: Some(vec![0.0123, 0.0123, 0.0123]),
                },
            },
        ],
    };
    b.add(
        r,
        "table",
        None,
        NodeStatus::Ran,
        &fit_keys,
        Some(Artifact::new(Value::Table(table))),
    );

    // Recipe 2: optical absorption, a Tauc plot, a calibration, a failure.
    let r = "optical";
    let refs_tauc = [("tauc1966", "J. Tauc, R. Grigorovici, A. Vancu, Optical properties and electronic structure of amorphous germanium, Phys. Status Solidi B 15 (1966) 627-637.")];
    steps.push(step(r, "uv", "import.delimited", "Spectra were read from comma-separated text files, taking photon energy (eV) from column 1 and absorbance from column 2.", &[], &["samples:films"], false));
    steps.push(step(r, "tauc", "optical.tauc", "Band gaps were estimated from Tauc plots [tauc1966] for a direct allowed transition, plotting (αhν)² against hν and extrapolating a straight line fitted between 3.30 and 3.60 eV to zero; α was taken as 2.303·A/d with d = 250 nm.", &refs_tauc, &["uv"], false));
    steps.push(step(r, "calib", "quantify.calibration", "A straight calibration line was fitted by ordinary least squares to five standards and used to convert each unknown's absorbance into a concentration.", &[], &["uv"], true));
    steps.push(step(r, "onset", "measure.onset", "Absorption onsets were located where the first derivative exceeds 5 % of its maximum [tauc1966].", &refs_tauc, &["uv"], false));
    steps.push(step(
        r,
        "ratio",
        "quantify.ratio",
        "The onset was divided by the band gap.",
        &[],
        &["onset", "tauc"],
        false,
    ));
    steps.push(step(
        r,
        "table",
        "gather.table",
        "Results were collected into one table with a row per sample.",
        &[],
        &["tauc"],
        true,
    ));
    steps.push(step(
        r,
        "maxima",
        "measure.peaks",
        "Local maxima with a prominence of at least 10 % of the data range were located.",
        &[],
        &["uv"],
        false,
    ));
    let ev = Axis::new("photon energy", "eV");
    let mut uv_keys = Vec::new();
    for (k, item) in ["film_a", "film_c"].iter().enumerate() {
        let eg = 3.2 + 0.05 * k as f64;
        let x: Vec<f64> = (0..200).map(|i| 2.5 + 1.5 * i as f64 / 199.0).collect();
        let y: Vec<f64> = x
            .iter()
            .enumerate()
            .map(|(i, e)| if *e > eg { 40.0 * (e - eg) } else { 0.0 } + 0.3 * wobble(i + 7))
            .collect();
        let ku = b.add(
            r,
            "uv",
            Some(item),
            NodeStatus::Ran,
            &[],
            Some(Artifact::new(Value::Spectrum(Spectrum::new(
                x.clone(),
                y.clone(),
                ev.clone(),
                Axis::new("absorbance", ""),
            )))),
        );
        uv_keys.push(ku.clone());
        let top = y.len() - 1;
        let located = PeakList {
            spectrum: Spectrum::new(
                x.clone(),
                y.clone(),
                ev.clone(),
                Axis::new("absorbance", ""),
            ),
            peaks: vec![Peak {
                index: top,
                position: x[top],
                height: y[top],
                prominence: y[top],
                fwhm: 0.25,
            }],
        };
        b.add(
            r,
            "maxima",
            Some(item),
            NodeStatus::Ran,
            std::slice::from_ref(&ku),
            Some(Artifact::new(Value::Peaks(located))),
        );
        let mut ts = Spectrum::new(
            x.clone(),
            y.clone(),
            ev.clone(),
            Axis::new("(αhν)²", "eV² cm⁻²"),
        );
        ts.curves.push(Curve {
            name: "linear fit".into(),
            role: CurveRole::Guide,
            y: x.iter()
                .map(|e| {
                    if (eg..3.7).contains(e) {
                        40.0 * (e - eg)
                    } else {
                        f64::NAN
                    }
                })
                .collect(),
        });
        let art = Artifact::new(Value::Spectrum(ts)).with_results(vec![Record::number(
            "band_gap",
            eg,
            Some(0.004567),
            "eV",
        )]);
        let kt = b.add(
            r,
            "tauc",
            Some(item),
            NodeStatus::Ran,
            std::slice::from_ref(&ku),
            Some(art),
        );
        if k == 0 {
            let ko = b.add(
                r,
                "onset",
                Some(item),
                NodeStatus::Ran,
                std::slice::from_ref(&ku),
                Some(
                    Artifact::new(Value::Summary).with_results(vec![Record::number(
                        "onset",
                        3.1,
                        Some(0.02),
                        "eV",
                    )]),
                ),
            );
            b.add(
                r,
                "ratio",
                Some(item),
                NodeStatus::Ran,
                &[ko, kt],
                Some(
                    Artifact::new(Value::Summary).with_results(vec![Record::number(
                        "ratio",
                        0.97,
                        Some(0.0071),
                        "",
                    )]),
                ),
            );
        } else {
            let ko = b.add(r, "onset", Some(item), NodeStatus::Failed { error: "no point of the first derivative exceeds the threshold (data line 12 onwards is flat)".into() }, std::slice::from_ref(&ku), None);
            b.add(
                r,
                "ratio",
                Some(item),
                NodeStatus::Skipped {
                    because: format!("onset failed for {item}"),
                },
                &[ko, kt],
                None,
            );
        }
    }
    let calib = Table {
        title: "Calibration".into(),
        columns: vec![
            Column {
                name: "role".into(),
                unit: String::new(),
                data: ColumnData::Text(
                    [
                        "standard", "standard", "standard", "standard", "standard", "unknown",
                        "unknown",
                    ]
                    .map(String::from)
                    .to_vec(),
                ),
            },
            Column {
                name: "concentration".into(),
                unit: "mg/L".into(),
                data: ColumnData::Number {
                    values: vec![0.0, 2.0, 4.0, 6.0, 8.0, 3.1, 5.6],
                    uncertainty: None,
                },
            },
            Column {
                name: "absorbance".into(),
                unit: String::new(),
                data: ColumnData::Number {
                    values: vec![0.002, 0.101, 0.198, 0.305, 0.399, 0.155, 0.281],
                    uncertainty: Some(vec![0.004, 0.004, 0.004, 0.004, 0.004, 0.004, 0.004]),
                },
            },
        ],
    };
    b.add(
        r,
        "calib",
        None,
        NodeStatus::Ran,
        &uv_keys,
        Some(Artifact::new(Value::Table(calib)).with_results(vec![
            Record::number("slope", 0.04985, Some(0.00041), "L/mg"),
            Record::number("intercept", 0.0012, Some(0.0019), ""),
        ])),
    );
    let gaps = Table {
        title: "Band gaps".into(),
        columns: vec![
            Column {
                name: "item".into(),
                unit: String::new(),
                data: ColumnData::Text(vec!["film_a".into(), "film_c".into()]),
            },
            Column {
                name: "band_gap".into(),
                unit: "eV".into(),
                data: ColumnData::Number {
                    values: vec![3.2, 3.25],
                    uncertainty: Some(vec![0.004567, 0.004567]),
                },
            },
        ],
    };
    b.add(
        r,
        "table",
        None,
        NodeStatus::Ran,
        &uv_keys,
        Some(Artifact::new(Value::Table(gaps))),
    );

    // Recipe 3: particles in a micrograph.
    let r = "particles";
    let refs_otsu = [("otsu1979", "N. Otsu, A threshold selection method from gray-level histograms, IEEE Trans. Syst. Man Cybern. 9 (1979) 62-66.")];
    steps.push(step(r, "img", "import.image", "Micrographs were read from 16-bit greyscale TIFF files with the pixel size from their metadata.", &[], &["samples:sem"], false));
    steps.push(step(r, "labels", "segment.threshold", "Particles were separated from the background by Otsu's threshold [otsu1979] and labelled with 8-connectivity, excluding particles touching the image edge.", &refs_otsu, &["img"], false));
    steps.push(step(r, "sizes", "gather.histogram", "Equivalent circular diameters were collected into a histogram of 8 bins between 0 and 80 nm, and a log-normal distribution was fitted to them by maximum likelihood.", &[], &["labels"], true));
    let (w, h) = (300usize, 200usize);
    let centres = [
        (60.0, 50.0, 18.0),
        (150.0, 100.0, 25.0),
        (240.0, 60.0, 14.0),
        (90.0, 150.0, 20.0),
    ];
    let mut data = vec![0f32; w * h];
    let mut labels = vec![0u32; w * h];
    for y in 0..h {
        for x in 0..w {
            let mut v = 800.0 + 100.0 * wobble(y * w + x);
            for (l, (cx, cy, rad)) in centres.iter().enumerate() {
                if ((x as f64 - cx).powi(2) + (y as f64 - cy).powi(2)).sqrt() < *rad {
                    v += 2500.0;
                    labels[y * w + x] = l as u32 + 1;
                }
            }
            data[y * w + x] = v as f32;
        }
    }
    let px = PixelSize {
        x: 2.5,
        y: 2.5,
        unit: "nm".into(),
    };
    let img = Image {
        width: w,
        height: h,
        data,
        pixel_size: Some(px.clone()),
        z_axis: Axis::new("intensity", "counts"),
        source_bits: 16,
        metadata: BTreeMap::new(),
    };
    let ki = b.add(
        r,
        "img",
        Some("grid_01"),
        NodeStatus::Ran,
        &[],
        Some(Artifact::new(Value::Image(img))),
    );
    let lab = Labels {
        width: w,
        height: h,
        labels,
        count: 4,
        pixel_size: Some(px),
        metadata: BTreeMap::new(),
    };
    let mut la = Artifact::new(Value::Labels(lab))
        .with_results(vec![Record::number("count", 4.0, None, "")]);
    la.warn("only 4 particles: a size distribution from fewer than 100 particles is not reliable");
    let kl = b.add(
        r,
        "labels",
        Some("grid_01"),
        NodeStatus::Ran,
        &[ki],
        Some(la),
    );
    let lows: Vec<f64> = (0..8).map(|i| 10.0 * i as f64).collect();
    let hist = Table {
        title: "equivalent diameter".into(),
        columns: vec![
            Column {
                name: "bin_low".into(),
                unit: "nm".into(),
                data: ColumnData::Number {
                    values: lows.clone(),
                    uncertainty: None,
                },
            },
            Column {
                name: "bin_high".into(),
                unit: "nm".into(),
                data: ColumnData::Number {
                    values: lows.iter().map(|l| l + 10.0).collect(),
                    uncertainty: None,
                },
            },
            Column {
                name: "count".into(),
                unit: String::new(),
                data: ColumnData::Number {
                    values: vec![0.0, 0.0, 1.0, 1.0, 1.0, 1.0, 0.0, 0.0],
                    uncertainty: None,
                },
            },
            Column {
                name: "model".into(),
                unit: String::new(),
                data: ColumnData::Number {
                    values: vec![0.01, 0.2, 0.8, 1.1, 0.9, 0.6, 0.2, 0.05],
                    uncertainty: None,
                },
            },
        ],
    };
    b.add(
        r,
        "sizes",
        None,
        NodeStatus::Ran,
        &[kl],
        Some(Artifact::new(Value::Table(hist)).with_results(vec![
            Record::number("diameter.median", 45.678, Some(3.4567), "nm"),
            Record::number("particles", 4.0, None, ""),
        ])),
    );

    let recipe = |id: &str, title: &str, path: &str, source: &str| RecipeRecord {
        id: id.into(),
        title: title.into(),
        description: format!("Invented demonstration data for {title}."),
        author: "A. N. Analyst".into(),
        path: path.into(),
        source: source.into(),
        hash: format!("{:064x}", blake3_like(source) as u128),
    };
    let record = RunRecord {
        schema_version: RUN_RECORD_SCHEMA_VERSION,
        engine_version: "0.1.0".into(),
        recipes: vec![
            recipe("chapter-3", "Chapter 3: annealed coatings", "chapter.yaml", "id: chapter-3\ntitle: \"Chapter 3: annealed coatings\"\ninclude: [c1s.yaml, optical.yaml, particles.yaml]\n# a comment with <b>markup</b> & ``` fences\n"),
            recipe("c1s-fits", "C 1s envelopes", "c1s.yaml", "id: c1s-fits\nsteps:\n  raw: { stage: import.delimited, from: c1s }\n"),
            recipe("optical", "Optical band gaps", "optical.yaml", "id: optical\nsteps:\n  uv: { stage: import.delimited, from: films }\n"),
            recipe("particles", "Particle sizes", "particles.yaml", "id: particles\nsteps:\n  img: { stage: import.image, from: sem }\n"),
        ],
        parameters: vec![ParameterRecord { recipe: "c1s-fits".into(), name: "carbon_ref_ev".into(), value: serde_json::json!(284.8), unit: "eV".into(), about: "adventitious C 1s reference".into(), overridden: false }],
        steps,
        nodes: b.nodes,
        checks: vec![
            CheckRecord { recipe: "c1s-fits".into(), result: "envelope.fraction.cc".into(), item: Some("film_a".into()), expected: "0.70 ± 0.03".into(), found: Some(0.70), unit: String::new(), passed: true, message: String::new() },
            CheckRecord { recipe: "optical".into(), result: "tauc.band_gap".into(), item: Some(EVIL.into()), expected: "3.40 ± 0.05".into(), found: Some(3.2), unit: "eV".into(), passed: false, message: "outside the tolerance by 0.15 eV".into() },
        ],
        started: "2026-12-01T10:00:00Z".into(),
        finished: "2026-12-01T10:00:02Z".into(),
        host: "bench-1".into(),
        cache_dir: "/tmp/cache".into(),
    };
    Fixture {
        record,
        artifacts: b.artifacts,
    }
}
