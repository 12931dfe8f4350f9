//! `image.import`: a greyscale image or height map from PNG, TIFF or a plain-text matrix.
//!
//! PNG (8/16-bit grey, grey+alpha, RGB, RGBA, palette) and TIFF (8/16/32-bit unsigned
//! grey, 32/64-bit float grey, RGB, RGBA) are decoded with the `png` and `tiff` crates.
//! Samples keep their full depth (f32 holds every 16-bit integer exactly). Colour is
//! turned into grey by a stated weighting: ITU-R BT.709 luma (0.2126 R + 0.7152 G +
//! 0.0722 B) by default, ITU-R BT.601 (0.299 R + 0.587 G + 0.114 B), or one channel;
//! alpha is ignored.
//!
//! Plain-text height matrices (a common export of probe microscopes): one image row per
//! line, numbers separated by whitespace, commas, semicolons or tabs. Lines starting with
//! `#` are comments; comment lines of the form `# key: value` are read as a header. This
//! project's header keys are `pixel_size` (`# pixel_size: 2 nm`, or `# pixel_size: 2 3 nm`
//! for x and y), `z_unit` (`# z_unit: nm`) and `z_quantity` (`# z_quantity: height`).
//! One leading non-numeric line (column titles) is skipped.
//!
//! The pixel size comes, in order of precedence, from a scale bar (its physical length and
//! either its length in pixels or the longest horizontal run of extreme pixels in a named
//! rectangle), from the `pixel_size` option, or from a text header; without any, the image
//! is analysed in pixels (unit `px`). `crop_bottom` removes rows at the bottom (a data bar)
//! after the scale bar is measured. Plain parsing; no published method (common practice).

use crate::image::common::with_data;
use crate::stage::{Inputs, OptionError, Port, StageError, StageInfo, TypedStage};
use crate::value::{Artifact, Axis, Image, Kind, PixelSize, Value};
use schemars::JsonSchema;
use serde::{Deserialize, Serialize};
use std::collections::BTreeMap;
use std::io::Cursor;

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Format {
    /// From the file signature: PNG, TIFF (II*/MM*), otherwise text.
    Auto,
    Png,
    Tiff,
    Text,
}

#[derive(Clone, Copy, Debug, PartialEq, Eq, Serialize, Deserialize, JsonSchema)]
#[serde(rename_all = "snake_case")]
pub enum Grey {
    /// ITU-R BT.709 luma: 0.2126 R + 0.7152 G + 0.0722 B.
    Bt709,
    /// ITU-R BT.601 luma: 0.299 R + 0.587 G + 0.114 B.
    Bt601,
    /// The red channel only.
    Red,
    /// The green channel only.
    Green,
    /// The blue channel only.
    Blue,
}

impl Grey {
    fn weights(self) -> [f64; 3] {
        match self {
            Grey::Bt709 => [0.2126, 0.7152, 0.0722],
            Grey::Bt601 => [0.299, 0.587, 0.114],
            Grey::Red => [1.0, 0.0, 0.0],
            Grey::Green => [0.0, 1.0, 0.0],
            Grey::Blue => [0.0, 0.0, 1.0],
        }
    }
    fn words(self) -> &'static str {
        match self {
            Grey::Bt709 => "ITU-R BT.709 luma weights (0.2126, 0.7152, 0.0722)",
            Grey::Bt601 => "ITU-R BT.601 luma weights (0.299, 0.587, 0.114)",
            Grey::Red => "the red channel",
            Grey::Green => "the green channel",
            Grey::Blue => "the blue channel",
        }
    }
}

/// A scale bar burnt into the image.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields)]
pub struct ScaleBar {
    /// Physical length of the bar, in `unit`.
    pub length: f64,
    /// Length of the bar in pixels, when measured by hand; otherwise it is detected in `region`.
    #[serde(default)]
    pub pixels: Option<f64>,
    /// Rectangle searched for the bar: [column, row, width, height] in pixels of the
    /// uncropped image (0-based, from the top left).
    #[serde(default)]
    pub region: Option<[usize; 4]>,
    /// The bar is drawn in the brightest value of the region (true) or the darkest (false).
    #[serde(default = "yes")]
    pub bright: bool,
}

fn yes() -> bool {
    true
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize, JsonSchema)]
#[serde(deny_unknown_fields, default)]
pub struct Options {
    /// File format; `auto` tells PNG and TIFF by their signatures and reads anything else as text.
    pub format: Format,
    /// How colour samples are turned into grey (default ITU-R BT.709 luma).
    pub grey: Grey,
    /// Physical size of one (square) pixel, in `unit`; none by default.
    pub pixel_size: Option<f64>,
    /// Unit of `pixel_size` and of the scale bar's length (e.g. `nm`, `µm`).
    pub unit: String,
    /// Calibrate the pixel size from a scale bar instead (takes precedence over `pixel_size`).
    pub scale_bar: Option<ScaleBar>,
    /// Rows removed from the bottom of the image (a data bar); 0 by default.
    pub crop_bottom: usize,
    /// Quantity of the samples (default `intensity`, or the text header's `z_quantity`).
    pub z_quantity: Option<String>,
    /// Unit of the samples (default `counts`, or the text header's `z_unit`).
    pub z_unit: Option<String>,
    /// Largest number of pixels accepted (guards against absurd sizes); default 2^28.
    pub max_pixels: usize,
}

impl Default for Options {
    fn default() -> Self {
        Options {
            format: Format::Auto,
            grey: Grey::Bt709,
            pixel_size: None,
            unit: "nm".into(),
            scale_bar: None,
            crop_bottom: 0,
            z_quantity: None,
            z_unit: None,
            max_pixels: 1 << 28,
        }
    }
}

pub struct ImportImage;

static INPUTS: &[Port] = &[Port::each(
    "file",
    Kind::File,
    "a PNG, TIFF or text matrix file",
)];

impl TypedStage for ImportImage {
    type Options = Options;
    const INFO: &'static StageInfo = &StageInfo {
        name: "image.import",
        version: 1,
        summary:
            "Read a greyscale image or height map (PNG, TIFF, text matrix) with its pixel size",
        inputs: INPUTS,
        output: Kind::Image,
        references: &[],
    };

    fn check(&self, o: &Options) -> Result<(), OptionError> {
        if let Some(p) = o.pixel_size {
            if !(p > 0.0 && p.is_finite()) {
                return Err(OptionError::new(
                    "pixel_size",
                    "pixel_size must be a positive number",
                ));
            }
        }
        if let Some(sb) = &o.scale_bar {
            if !(sb.length > 0.0 && sb.length.is_finite()) {
                return Err(OptionError::new(
                    "scale_bar.length",
                    "the bar length must be positive",
                ));
            }
            match (sb.pixels, sb.region) {
                (Some(p), _) if !(p > 0.0 && p.is_finite()) => {
                    return Err(OptionError::new("scale_bar.pixels", "must be positive"))
                }
                (None, None) => {
                    return Err(OptionError::new(
                        "scale_bar",
                        "give either the bar's length in pixels or a region to detect it in",
                    ))
                }
                _ => {}
            }
        }
        if o.unit.trim().is_empty() || o.unit == "px" {
            return Err(OptionError::new(
                "unit",
                "give a physical length unit such as nm or µm",
            ));
        }
        Ok(())
    }

    fn methods(&self, o: &Options) -> String {
        let scale = match (&o.scale_bar, o.pixel_size) {
            (Some(sb), _) => match sb.pixels {
                Some(p) => format!("the pixel size was calibrated from a {} {} scale bar measured as {p} pixels", sb.length, o.unit),
                None => format!(
                    "the pixel size was calibrated from a {} {} scale bar detected as the longest horizontal run of {} pixels in the given region",
                    sb.length, o.unit, if sb.bright { "brightest" } else { "darkest" }
                ),
            },
            (None, Some(p)) => format!("the pixel size was set to {p} {}", o.unit),
            (None, None) => "the pixel size was taken from the file header when present (otherwise lengths are in pixels)".into(),
        };
        let crop = if o.crop_bottom > 0 {
            format!(
                ", {} rows of data bar were cropped from the bottom",
                o.crop_bottom
            )
        } else {
            String::new()
        };
        format!(
            "Images were read at their full bit depth, colour converted to grey with {}, {scale}{crop}.",
            o.grey.words()
        )
    }

    fn run(&self, inputs: &Inputs, o: &Options) -> Result<Artifact, StageError> {
        let file = crate::image::common::file_in(inputs, 0)?;
        let (img, notes) = decode(&file.name, &file.bytes, o)?;
        let (px, _, unit) = crate::image::common::pixel_dims(&img.pixel_size);
        let recs = vec![
            crate::value::Record::number("pixel_size", px, None, &unit),
            crate::value::Record::number("width", img.width as f64, None, "px"),
            crate::value::Record::number("height", img.height as f64, None, "px"),
        ];
        let no_scale = img.pixel_size.is_none();
        let mut a = Artifact::new(Value::Image(img)).with_results(recs);
        for n in notes {
            a.info(n);
        }
        if no_scale {
            a.warn("no pixel size is known: lengths are in pixels (px)");
        }
        Ok(a)
    }
}

/// Decodes an image file with the import options; returns the image and info notes.
pub fn decode(name: &str, bytes: &[u8], o: &Options) -> Result<(Image, Vec<String>), StageError> {
    let mut notes = Vec::new();
    if bytes.is_empty() {
        return Err(StageError::data(name, None, "the file is empty"));
    }
    let format = match o.format {
        Format::Auto if bytes.starts_with(b"\x89PNG\r\n\x1a\n") => Format::Png,
        Format::Auto if bytes.starts_with(b"II*\0") || bytes.starts_with(b"MM\0*") => Format::Tiff,
        Format::Auto => Format::Text,
        f => f,
    };
    let mut header = BTreeMap::new();
    let (w, h, data, bits) = match format {
        Format::Png => decode_png(name, bytes, o)?,
        Format::Tiff => decode_tiff(name, bytes, o)?,
        _ => decode_text(name, bytes, o, &mut header)?,
    };
    let mut img = Image {
        width: w,
        height: h,
        data,
        pixel_size: None,
        z_axis: Axis::new(
            o.z_quantity
                .clone()
                .or_else(|| header.get("z_quantity").cloned())
                .unwrap_or_else(|| {
                    if format == Format::Text {
                        "height".into()
                    } else {
                        "intensity".into()
                    }
                }),
            o.z_unit
                .clone()
                .or_else(|| header.get("z_unit").cloned())
                .unwrap_or_else(|| {
                    if format == Format::Text {
                        String::new()
                    } else {
                        "counts".into()
                    }
                }),
        ),
        source_bits: bits,
        metadata: BTreeMap::new(),
    };
    img.metadata.insert("source".into(), name.to_string());
    img.metadata.insert("source_bits".into(), bits.to_string());
    if let Some(ps) = header.get("pixel_size") {
        img.pixel_size = Some(parse_header_pixel_size(name, ps)?);
    }
    if let Some(p) = o.pixel_size {
        img.pixel_size = Some(PixelSize {
            x: p,
            y: p,
            unit: o.unit.clone(),
        });
    }
    if let Some(sb) = &o.scale_bar {
        let px = match (sb.pixels, sb.region) {
            (Some(p), _) => p,
            (None, Some(region)) => {
                let run = detect_bar(&img, region, sb.bright)
                    .map_err(|m| StageError::data(name, None, m))?;
                notes.push(format!("scale bar detected: {run} pixels long"));
                run as f64
            }
            (None, None) => return Err(StageError::input("scale bar needs pixels or a region")),
        };
        let p = sb.length / px;
        img.pixel_size = Some(PixelSize {
            x: p,
            y: p,
            unit: o.unit.clone(),
        });
        img.metadata
            .insert("scale_bar_pixels".into(), px.to_string());
    }
    if o.crop_bottom > 0 {
        if o.crop_bottom >= img.height {
            return Err(StageError::input(format!(
                "crop_bottom ({}) removes the whole image of {} rows",
                o.crop_bottom, img.height
            )));
        }
        let h2 = img.height - o.crop_bottom;
        let data = img.data[..h2 * img.width].to_vec();
        img = with_data(
            &Image {
                height: h2,
                data: Vec::new(),
                ..img.clone()
            },
            data,
        );
        notes.push(format!("{} rows cropped from the bottom", o.crop_bottom));
    }
    if let Some(p) = &img.pixel_size {
        img.metadata
            .insert("pixel_size".into(), format!("{} {}", p.x, p.unit));
    }
    notes.push(format!(
        "{}×{} pixels, {}-bit samples, read from {name}",
        img.width, img.height, bits
    ));
    Ok((img, notes))
}

fn parse_header_pixel_size(name: &str, text: &str) -> Result<PixelSize, StageError> {
    let parts: Vec<&str> = text.split_whitespace().collect();
    let bad = || {
        StageError::data(
            name,
            None,
            format!("header pixel_size '{text}' is not 'VALUE UNIT' or 'X Y UNIT'"),
        )
    };
    let num = |s: &str| s.parse::<f64>().ok().filter(|v| *v > 0.0 && v.is_finite());
    match parts.as_slice() {
        [v, u] => {
            let v = num(v).ok_or_else(bad)?;
            Ok(PixelSize {
                x: v,
                y: v,
                unit: u.to_string(),
            })
        }
        [x, y, u] => Ok(PixelSize {
            x: num(x).ok_or_else(bad)?,
            y: num(y).ok_or_else(bad)?,
            unit: u.to_string(),
        }),
        _ => Err(bad()),
    }
}

/// Longest horizontal run of pixels equal to the region's extreme value.
fn detect_bar(img: &Image, region: [usize; 4], bright: bool) -> Result<usize, String> {
    let [c0, r0, rw, rh] = region;
    if rw == 0 || rh == 0 || c0 + rw > img.width || r0 + rh > img.height {
        return Err(format!(
            "scale-bar region [{c0}, {r0}, {rw}, {rh}] does not fit in the {}×{} image",
            img.width, img.height
        ));
    }
    let mut extreme = if bright {
        f32::NEG_INFINITY
    } else {
        f32::INFINITY
    };
    for r in r0..r0 + rh {
        for c in c0..c0 + rw {
            let v = img.get(c, r);
            extreme = if bright {
                extreme.max(v)
            } else {
                extreme.min(v)
            };
        }
    }
    let mut best = 0;
    for r in r0..r0 + rh {
        let mut run = 0;
        for c in c0..c0 + rw {
            if img.get(c, r) == extreme {
                run += 1;
                best = best.max(run);
            } else {
                run = 0;
            }
        }
    }
    if best < 2 {
        return Err("no scale bar (a horizontal run of extreme pixels) found in the region".into());
    }
    Ok(best)
}

type Decoded = (usize, usize, Vec<f32>, u8);

fn check_size(name: &str, w: usize, h: usize, o: &Options) -> Result<(), StageError> {
    if w == 0 || h == 0 {
        return Err(StageError::data(
            name,
            None,
            format!("the image has zero size ({w}×{h})"),
        ));
    }
    if w.saturating_mul(h) > o.max_pixels {
        return Err(StageError::data(
            name,
            None,
            format!(
                "the image is {w}×{h} pixels, more than the {} allowed (max_pixels)",
                o.max_pixels
            ),
        ));
    }
    Ok(())
}

fn to_grey(
    name: &str,
    samples: &[f64],
    channels: usize,
    o: &Options,
) -> Result<Vec<f32>, StageError> {
    match channels {
        1 => Ok(samples.iter().map(|&v| v as f32).collect()),
        2 => Ok(samples.chunks_exact(2).map(|p| p[0] as f32).collect()),
        3 | 4 => {
            let wt = o.grey.weights();
            Ok(samples
                .chunks_exact(channels)
                .map(|p| (wt[0] * p[0] + wt[1] * p[1] + wt[2] * p[2]) as f32)
                .collect())
        }
        n => Err(StageError::data(
            name,
            None,
            format!("{n} samples per pixel are not supported"),
        )),
    }
}

fn decode_png(name: &str, bytes: &[u8], o: &Options) -> Result<Decoded, StageError> {
    let err = |e: png::DecodingError| {
        let e = e.to_string();
        // The decoder's CRC message prints internal chunk structures; say it plainly.
        let e = match e.split_once(" while decoding ChunkType { type: ") {
            Some((head, rest)) => {
                let chunk = rest.split(',').next().unwrap_or("?");
                format!("{head} in the {chunk} chunk (the file is corrupted)")
            }
            None => e,
        };
        StageError::data(name, None, format!("not a readable PNG: {e}"))
    };
    let mut dec = png::Decoder::new_with_limits(Cursor::new(bytes), png::Limits { bytes: 1 << 31 });
    // Palette and low-bit grey are expanded to 8 bits; 16-bit samples are kept.
    dec.set_transformations(png::Transformations::EXPAND);
    let head = dec.read_header_info().map_err(err)?;
    let (w, h) = (head.width as usize, head.height as usize);
    check_size(name, w, h, o)?;
    let mut reader = dec.read_info().map_err(err)?;
    let size = reader
        .output_buffer_size()
        .ok_or_else(|| StageError::data(name, None, "PNG too large to decode"))?;
    let mut buf = vec![0u8; size];
    let info = reader.next_frame(&mut buf).map_err(err)?;
    let channels = info.color_type.samples();
    let bits = info.bit_depth as u8;
    let line = info.line_size;
    let mut samples = Vec::with_capacity(w * h * channels);
    for r in 0..h {
        let row = &buf[r * line..r * line + line];
        if bits == 16 {
            for c in row.chunks_exact(2).take(w * channels) {
                samples.push(u16::from_be_bytes([c[0], c[1]]) as f64);
            }
        } else {
            samples.extend(row.iter().take(w * channels).map(|&b| b as f64));
        }
    }
    Ok((w, h, to_grey(name, &samples, channels, o)?, bits))
}

fn decode_tiff(name: &str, bytes: &[u8], o: &Options) -> Result<Decoded, StageError> {
    use tiff::decoder::{Decoder, DecodingResult};
    use tiff::ColorType;
    let err =
        |e: tiff::TiffError| StageError::data(name, None, format!("not a readable TIFF: {e}"));
    let mut dec = Decoder::new(Cursor::new(bytes)).map_err(err)?;
    let (w, h) = dec.dimensions().map_err(err)?;
    let (w, h) = (w as usize, h as usize);
    check_size(name, w, h, o)?;
    let (channels, bits) = match dec.colortype().map_err(err)? {
        ColorType::Gray(b) => (1, b),
        ColorType::GrayA(b) => (2, b),
        ColorType::RGB(b) => (3, b),
        ColorType::RGBA(b) => (4, b),
        other => {
            return Err(StageError::data(
                name,
                None,
                format!("TIFF colour type {other:?} is not supported"),
            ))
        }
    };
    let mut limits = tiff::decoder::Limits::default();
    limits.decoding_buffer_size = 1 << 31;
    dec = dec.with_limits(limits);
    let samples: Vec<f64> = match dec.read_image().map_err(err)? {
        DecodingResult::U8(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::U16(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::U32(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::I8(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::I16(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::I32(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::F32(v) => v.into_iter().map(f64::from).collect(),
        DecodingResult::F64(v) => v,
        _ => {
            return Err(StageError::data(
                name,
                None,
                "TIFF sample format is not supported",
            ))
        }
    };
    if samples.len() < w * h * channels {
        return Err(StageError::data(
            name,
            None,
            "TIFF holds fewer samples than its size says (truncated?)",
        ));
    }
    let grey = to_grey(name, &samples[..w * h * channels], channels, o)?;
    if let Some(i) = grey.iter().position(|v| !v.is_finite()) {
        return Err(StageError::data(
            name,
            None,
            format!(
                "sample at column {}, row {} is not a finite number",
                i % w,
                i / w
            ),
        ));
    }
    Ok((w, h, grey, bits))
}

fn decode_text(
    name: &str,
    bytes: &[u8],
    o: &Options,
    header: &mut BTreeMap<String, String>,
) -> Result<Decoded, StageError> {
    let text =
        crate::image::common::utf8_text(name, bytes, "neither PNG, TIFF nor valid UTF-8 text")?;
    let mut rows: Vec<Vec<f32>> = Vec::new();
    let mut width = 0;
    let mut skipped_title = false;
    for (i, raw) in text.lines().enumerate() {
        let line_no = i + 1;
        let line = raw.trim();
        if line.is_empty() {
            continue;
        }
        if let Some(c) = line.strip_prefix('#') {
            if let Some((k, v)) = c.split_once(':') {
                let k = k.trim().to_ascii_lowercase();
                if matches!(k.as_str(), "pixel_size" | "z_unit" | "z_quantity") {
                    header.insert(k, v.trim().to_string());
                }
            }
            continue;
        }
        let fields: Vec<&str> = line
            .split(|c: char| c == ',' || c == ';' || c.is_whitespace())
            .filter(|s| !s.is_empty())
            .collect();
        let parsed: Result<Vec<f32>, _> = fields.iter().map(|s| s.parse::<f32>()).collect();
        match parsed {
            Ok(row) => {
                if let Some(j) = row.iter().position(|v| !v.is_finite()) {
                    return Err(StageError::data(
                        name,
                        Some(line_no),
                        format!("value {} is not finite", j + 1),
                    ));
                }
                if rows.is_empty() {
                    width = row.len();
                } else if row.len() != width {
                    return Err(StageError::data(
                        name,
                        Some(line_no),
                        format!("row has {} values, earlier rows {width}", row.len()),
                    ));
                }
                rows.push(row);
                if rows.len().saturating_mul(width) > o.max_pixels {
                    return Err(StageError::data(
                        name,
                        Some(line_no),
                        "more values than max_pixels allows",
                    ));
                }
            }
            Err(_) if rows.is_empty() && !skipped_title => skipped_title = true,
            Err(_) => {
                let bad = fields
                    .iter()
                    .find(|s| s.parse::<f32>().is_err())
                    .unwrap_or(&"");
                return Err(StageError::data(
                    name,
                    Some(line_no),
                    format!("'{bad}' is not a number"),
                ));
            }
        }
    }
    let h = rows.len();
    if h == 0 {
        return Err(StageError::data(
            name,
            None,
            "no rows of numbers: neither PNG, TIFF nor a text matrix",
        ));
    }
    check_size(name, width, h, o)?;
    Ok((width, h, rows.into_iter().flatten().collect(), 32))
}

#[cfg(test)]
mod tests {
    use super::*;

    fn png_bytes(
        w: u32,
        h: u32,
        color: png::ColorType,
        depth: png::BitDepth,
        data: &[u8],
    ) -> Vec<u8> {
        let mut out = Vec::new();
        {
            let mut e = png::Encoder::new(&mut out, w, h);
            e.set_color(color);
            e.set_depth(depth);
            let mut wr = e.write_header().unwrap();
            wr.write_image_data(data).unwrap();
        }
        out
    }

    #[test]
    fn png_16_bit_keeps_every_level() {
        let vals: [u16; 4] = [0, 1, 40000, 65535];
        let bytes: Vec<u8> = vals.iter().flat_map(|v| v.to_be_bytes()).collect();
        let f = png_bytes(
            2,
            2,
            png::ColorType::Grayscale,
            png::BitDepth::Sixteen,
            &bytes,
        );
        let (img, _) = decode("a.png", &f, &Options::default()).unwrap();
        assert_eq!(img.data, vec![0.0, 1.0, 40000.0, 65535.0]);
        assert_eq!(img.source_bits, 16);
        assert!(img.pixel_size.is_none());
    }

    #[test]
    fn rgb_png_uses_bt709_weights() {
        let f = png_bytes(
            1,
            1,
            png::ColorType::Rgb,
            png::BitDepth::Eight,
            &[100, 200, 50],
        );
        let (img, _) = decode("c.png", &f, &Options::default()).unwrap();
        // BT.709: 0.2126·100 + 0.7152·200 + 0.0722·50 = 167.91
        assert!((img.data[0] - 167.91).abs() < 1e-3);
    }

    #[test]
    fn truncated_png_names_the_file() {
        let f = png_bytes(
            4,
            4,
            png::ColorType::Grayscale,
            png::BitDepth::Eight,
            &[7; 16],
        );
        let e = decode("cut.png", &f[..f.len() - 20], &Options::default()).unwrap_err();
        assert!(e.to_string().contains("cut.png"), "{e}");
    }

    #[test]
    fn tiff_float_and_16_bit() {
        let mut out = Cursor::new(Vec::new());
        {
            let mut enc = tiff::encoder::TiffEncoder::new(&mut out).unwrap();
            enc.write_image::<tiff::encoder::colortype::Gray32Float>(2, 1, &[1.5, -2.25])
                .unwrap();
        }
        let (img, _) = decode("f.tif", out.get_ref(), &Options::default()).unwrap();
        assert_eq!(img.data, vec![1.5, -2.25]);
        let mut out = Cursor::new(Vec::new());
        {
            let mut enc = tiff::encoder::TiffEncoder::new(&mut out).unwrap();
            enc.write_image::<tiff::encoder::colortype::Gray16>(3, 1, &[0, 65535, 1234])
                .unwrap();
        }
        let (img, _) = decode("g.tif", out.get_ref(), &Options::default()).unwrap();
        assert_eq!(img.data, vec![0.0, 65535.0, 1234.0]);
        let e = decode("g.tif", &out.get_ref()[..20], &Options::default()).unwrap_err();
        assert!(e.to_string().contains("g.tif"));
    }

    #[test]
    fn text_matrix_with_header_and_errors() {
        let t = "# pixel_size: 2 nm\n# z_unit: nm\nx y z\n1, 2, 3\n4 5 6\n";
        let (img, _) = decode("h.txt", t.as_bytes(), &Options::default()).unwrap();
        assert_eq!((img.width, img.height), (3, 2));
        assert_eq!(img.pixel_size.as_ref().unwrap().x, 2.0);
        assert_eq!(img.z_axis.unit, "nm");
        let e = decode("h.txt", b"1 2\n3 x\n", &Options::default()).unwrap_err();
        assert_eq!(e, StageError::data("h.txt", Some(2), "'x' is not a number"));
        let e = decode("h.txt", b"1 2\n3\n", &Options::default()).unwrap_err();
        assert!(matches!(e, StageError::Data { line: Some(2), .. }));
        assert!(decode("e.txt", b"# only comments\n", &Options::default()).is_err());
    }

    #[test]
    fn absurd_sizes_are_refused_without_panic() {
        let row: String = std::iter::repeat_n("1 ", 100_000).collect();
        let o = Options {
            max_pixels: 50_000,
            ..Options::default()
        };
        assert!(decode("wide.txt", row.as_bytes(), &o).is_err());
        let (img, _) = decode("wide.txt", row.as_bytes(), &Options::default()).unwrap();
        assert_eq!((img.width, img.height), (100_000, 1));
    }

    #[test]
    fn scale_bar_detected_and_data_bar_cropped() {
        // 20×10 image, rows 8..10 are a data bar holding a 12-pixel white bar on row 9.
        let mut d = vec![10u8; 200];
        for c in 4..16 {
            d[9 * 20 + c] = 255;
        }
        let f = png_bytes(20, 10, png::ColorType::Grayscale, png::BitDepth::Eight, &d);
        let o = Options {
            scale_bar: Some(ScaleBar {
                length: 60.0,
                pixels: None,
                region: Some([0, 8, 20, 2]),
                bright: true,
            }),
            crop_bottom: 2,
            ..Options::default()
        };
        let (img, _) = decode("bar.png", &f, &o).unwrap();
        assert_eq!(img.height, 8);
        assert!((img.pixel_size.unwrap().x - 5.0).abs() < 1e-12);
    }
}
