//! Import checks: full bit depth kept, pixel size routes, and bad files refused with the
//! file named and no panic.

mod image_support;

use image_support::{num, run, Lcg};
use serde_json::json;
use stages::stage::PortValue;
use stages::{Artifact, InputFile, Value};

fn file(name: &str, bytes: Vec<u8>) -> Artifact {
    Artifact::new(Value::File(InputFile {
        name: name.into(),
        bytes,
    }))
}

fn png16(w: u32, h: u32, vals: &[u16]) -> Vec<u8> {
    let mut out = Vec::new();
    {
        let mut e = png::Encoder::new(&mut out, w, h);
        e.set_color(png::ColorType::Grayscale);
        e.set_depth(png::BitDepth::Sixteen);
        let mut wr = e.write_header().unwrap();
        let bytes: Vec<u8> = vals.iter().flat_map(|v| v.to_be_bytes()).collect();
        wr.write_image_data(&bytes).unwrap();
    }
    out
}

/// 16-bit samples survive exactly (f32 holds every integer up to 2^24); an image without a
/// pixel size is in px with a warning; a given pixel size is carried.
#[test]
fn sixteen_bit_png_is_not_squashed() {
    let vals: Vec<u16> = (0..64u32).map(|i| (i * 1031 % 65536) as u16).collect();
    let f = file("grey16.png", png16(8, 8, &vals));
    let a = run("image.import", vec![PortValue::One(&f)], json!({})).unwrap();
    let Value::Image(img) = &a.value else {
        panic!()
    };
    assert_eq!(img.data, vals.iter().map(|&v| v as f32).collect::<Vec<_>>());
    assert_eq!(a.result("pixel_size").unwrap().unit, "px");
    assert!(a.notes.iter().any(|n| n.text.contains("px")));
    let b = run(
        "image.import",
        vec![PortValue::One(&f)],
        json!({ "pixel_size": 0.5, "unit": "µm" }),
    )
    .unwrap();
    assert_eq!(num(&b, "pixel_size"), 0.5);
    assert_eq!(b.result("pixel_size").unwrap().unit, "µm");
}

/// Every truncation of a valid PNG and TIFF, and random bytes behind their signatures, give
/// either an image or an error naming the file; never a panic.
#[test]
fn damaged_files_are_refused_without_panic() {
    let png = png16(5, 4, &[7; 20]);
    let mut tif = std::io::Cursor::new(Vec::new());
    {
        let mut enc = tiff::encoder::TiffEncoder::new(&mut tif).unwrap();
        enc.write_image::<tiff::encoder::colortype::Gray16>(5, 4, &[9; 20])
            .unwrap();
    }
    let tif = tif.into_inner();
    for (name, good) in [("d.png", &png), ("d.tif", &tif)] {
        for cut in 0..good.len() {
            let f = file(name, good[..cut].to_vec());
            if let Err(e) = run("image.import", vec![PortValue::One(&f)], json!({})) {
                assert!(e.to_string().contains(name), "{e}");
            }
        }
    }
    let mut rng = Lcg(3);
    for k in 0..300 {
        let mut bytes: Vec<u8> = if k % 2 == 0 {
            b"\x89PNG\r\n\x1a\n".to_vec()
        } else {
            b"II*\0".to_vec()
        };
        let n = (rng.next() * 200.0) as usize;
        bytes.extend((0..n).map(|_| (rng.next() * 256.0) as u8));
        let f = file("noise.bin", bytes);
        let r = run("image.import", vec![PortValue::One(&f)], json!({}));
        assert!(r.is_err(), "random bytes decoded as an image");
    }
    let empty = file("empty.png", Vec::new());
    let e = run("image.import", vec![PortValue::One(&empty)], json!({})).unwrap_err();
    assert!(e.to_string().contains("empty.png"));
}
