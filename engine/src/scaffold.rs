//! `retort new TECHNIQUE`: a commented starter recipe for one technique, to stdout
//! or `-o FILE`. Each starter is a YAML file in `engine/src/scaffolds/`; a test
//! checks every one with `retort check` against a small fixture.

use crate::exit::Exit;
use std::path::Path;

/// (technique, what it covers, the recipe).
pub const SCAFFOLDS: &[(&str, &str, &str)] = &[
    (
        "uvvis",
        "UV-vis absorbance: Tauc band gap and band maximum",
        include_str!("scaffolds/uvvis.yaml"),
    ),
    (
        "xps",
        "XPS core level: charge reference, Shirley background, chemical-state fit",
        include_str!("scaffolds/xps.yaml"),
    ),
    (
        "nmr",
        "quantitative NMR: integrals and purity against an internal standard",
        include_str!("scaffolds/nmr.yaml"),
    ),
    (
        "eds",
        "EDS point spectra: net intensities and Cliff-Lorimer ratios",
        include_str!("scaffolds/eds.yaml"),
    ),
    (
        "xrd",
        "powder diffraction: peaks and Bragg d-spacings",
        include_str!("scaffolds/xrd.yaml"),
    ),
    (
        "particles",
        "SEM/TEM micrographs: particle size distribution",
        include_str!("scaffolds/particles.yaml"),
    ),
    (
        "afm",
        "AFM/STM height maps: levelling and roughness",
        include_str!("scaffolds/afm.yaml"),
    ),
    (
        "ediff",
        "electron diffraction rings: radial profile and d-spacings",
        include_str!("scaffolds/ediff.yaml"),
    ),
];

/// `retort new TECHNIQUE [-o FILE]`.
pub fn command(technique: Option<&str>, output: Option<&Path>, force: bool) -> Exit {
    let Some(t) = technique else {
        println!("techniques (retort new TECHNIQUE [-o FILE]):");
        for (name, about, _) in SCAFFOLDS {
            println!("  {name:<10} {about}");
        }
        return Exit::Ok;
    };
    let Some((_, _, text)) = SCAFFOLDS.iter().find(|(n, _, _)| *n == t) else {
        let hint = crate::diagnostics::did_you_mean(t, SCAFFOLDS.iter().map(|(n, _, _)| *n));
        let names: Vec<&str> = SCAFFOLDS.iter().map(|(n, _, _)| *n).collect();
        eprintln!(
            "error: no starter recipe for `{t}`{}; there are: {}",
            hint.map(|h| format!(" (did you mean `{h}`?)"))
                .unwrap_or_default(),
            names.join(", ")
        );
        return Exit::Usage;
    };
    match output {
        None => {
            print!("{text}");
            Exit::Ok
        }
        Some(p) => {
            if p.exists() && !force {
                eprintln!("error: {} exists; pass --force to replace it", p.display());
                return Exit::Usage;
            }
            match std::fs::write(p, text) {
                Ok(()) => {
                    eprintln!(
                        "wrote {}; put data where its `samples:` point, then `retort check {}`",
                        p.display(),
                        p.display()
                    );
                    Exit::Ok
                }
                Err(e) => {
                    eprintln!("error: {}: {e}", p.display());
                    Exit::StepFailed
                }
            }
        }
    }
}
