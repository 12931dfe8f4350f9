//! `eds.calibrate`: linear energy axis E = offset + gain·x from two known lines.
//!
//! Method (common practice for energy-dispersive detectors, whose response is linear
//! to well within a channel): the measured positions x1, x2 (channels or energies on
//! the current axis, optionally refined to the parabola vertex of the maximum within
//! ±`refine` of the given position) and the reference energies E1, E2 (given, or from
//! stages/data/xray_lines.csv by line name) fix gain = (E2 − E1)/(x2 − x1) and
//! offset = E1 − gain·x1. Two points determine the line exactly: no uncertainty is
//! attached to gain and offset.

use super::lines::{find_line, LINES_FILE};
use crate::measure::maximum::parabolic_vertex;
use crate::quant_util::indices_in;
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Kind, Record, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct KnownLine {
    /// Measured position on the current x axis (channel or energy).
    pub position: f64,
    /// Line name from the built-in table, e.g. `Cu Ka1`, `Al Ka1`.
    pub line: Option<String>,
    /// Reference energy, instead of a line name.
    #[schemars(extend("x-unit" = "keV"))]
    pub energy: Option<f64>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// Exactly two known lines.
    pub lines: Vec<KnownLine>,
    /// Half-width (x units) of the window around each position in which the maximum is
    /// located and refined; the positions are used as given when absent.
    pub refine: Option<f64>,
}

pub struct EdsCalibrate;

static INPUTS: &[Port] = &[Port::each(
    "spectrum",
    Kind::Spectrum,
    "an EDS spectrum on a channel or energy axis",
)];

impl TypedStage for EdsCalibrate {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "eds.calibrate",
        version: 1,
        summary: "Linear energy axis (gain and offset) from two known X-ray lines",
        inputs: INPUTS,
        output: Kind::Spectrum,
        references: &[super::identify::BOOKLET],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if o.lines.len() != 2 {
            return Err(OptionError::new(
                "lines",
                format!("give exactly two known lines (got {})", o.lines.len()),
            ));
        }
        for (i, l) in o.lines.iter().enumerate() {
            if l.line.is_some() == l.energy.is_some() {
                return Err(OptionError::new(
                    format!("lines.{i}"),
                    "give either line (a name) or energy (keV), not both",
                ));
            }
            if !l.position.is_finite() {
                return Err(OptionError::new(
                    format!("lines.{i}.position"),
                    "position must be a number",
                ));
            }
        }
        if o.lines[0].position == o.lines[1].position {
            return Err(OptionError::new("lines", "the two positions must differ"));
        }
        if let Some(r) = o.refine {
            crate::quant_util::check_positive("refine", r)?;
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let names: Vec<String> = o
            .lines
            .iter()
            .map(|l| match (&l.line, l.energy) {
                (Some(n), _) => n.clone(),
                (None, Some(e)) => format!("{e} keV"),
                _ => "?".into(),
            })
            .collect();
        let refine = o.refine.map_or(" at the given positions".to_string(), |r| {
            format!(" located within ±{r} of the given positions by a parabola through the maximum")
        });
        format!(
            "The energy axis was calibrated linearly from two known lines ({}){refine}, with reference energies from the X-ray Data Booklet [xdb2009].",
            names.join(" and ")
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let s = inputs.spectrum(0)?;
        let mut pts = Vec::new();
        for l in &o.lines {
            let e = match (&l.line, l.energy) {
                (Some(n), _) => find_line(n)?.energy_kev,
                (None, Some(e)) => e,
                _ => return Err(StageError::input("each line needs a name or an energy")),
            };
            let x = match o.refine {
                Some(w) => {
                    let idx = indices_in(&s.x, [l.position - w, l.position + w]);
                    let best = idx
                        .iter()
                        .copied()
                        .max_by(|a, b| s.y[*a].total_cmp(&s.y[*b]))
                        .ok_or_else(|| {
                            StageError::input(format!("no points within ±{w} of {}", l.position))
                        })?;
                    parabolic_vertex(&s.x, &s.y, best).0
                }
                None => l.position,
            };
            pts.push((x, e));
        }
        let gain = (pts[1].1 - pts[0].1) / (pts[1].0 - pts[0].0);
        let offset = pts[0].1 - gain * pts[0].0;
        if !(gain.is_finite() && offset.is_finite()) || gain <= 0.0 {
            return Err(StageError::input(format!(
                "the two lines give a non-positive gain ({gain}): check the positions"
            )));
        }
        let mut out = s.clone();
        out.x = s.x.iter().map(|x| offset + gain * x).collect();
        out.x_axis = Axis::new("energy", "keV");
        out.metadata.insert(
            "energy_calibration".into(),
            format!("E = {offset} + {gain}·x ({LINES_FILE})"),
        );
        let xu = &s.x_axis.unit;
        let mut art = Artifact::new(Value::Spectrum(out));
        art.record(Record::number(
            "gain",
            gain,
            None,
            &crate::quant_util::unit_ratio("keV", if xu.is_empty() { "channel" } else { xu }),
        ));
        art.record(Record::number("offset", offset, None, "keV"));
        art.record(Record::number("position_1", pts[0].0, None, xu));
        art.record(Record::number("position_2", pts[1].0, None, xu));
        Ok(art)
    }
}
