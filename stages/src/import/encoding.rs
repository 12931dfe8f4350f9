//! Text encodings of exported files: UTF-8 (with or without a byte-order mark) and
//! UTF-16 with a byte-order mark are decoded; UTF-16 without a mark and 8-bit
//! encodings (Latin-1, Windows-1252) are refused with the place of the first
//! offending byte, because guessing an 8-bit code page can silently change a unit
//! such as `µm` or `°`. Byte-order marks: Unicode Standard, section 23.8.

use crate::stage::StageError;
use std::borrow::Cow;

/// UTF-16 code units (after the byte-order mark) as text; the error says why not
/// ("with an odd number of bytes", "with an unpaired surrogate"). Shared with the
/// engine's recipe guard.
pub fn utf16_text(body: &[u8], little_endian: bool) -> Result<String, &'static str> {
    if !body.len().is_multiple_of(2) {
        return Err("with an odd number of bytes (truncated file?)");
    }
    let units = body.chunks_exact(2).map(|c| {
        if little_endian {
            u16::from_le_bytes([c[0], c[1]])
        } else {
            u16::from_be_bytes([c[0], c[1]])
        }
    });
    char::decode_utf16(units)
        .collect::<Result<String, _>>()
        .map_err(|_| "with an unpaired surrogate")
}

/// 1-based line and column (in characters) of the first invalid byte, and its index.
pub fn utf8_error_place(body: &[u8], e: &std::str::Utf8Error) -> (usize, usize, usize) {
    let at = e.valid_up_to();
    let before = &body[..at];
    let line = before.iter().filter(|&&b| b == b'\n').count() + 1;
    let start = before
        .iter()
        .rposition(|&b| b == b'\n')
        .map_or(0, |i| i + 1);
    let col = String::from_utf8_lossy(&before[start..]).chars().count() + 1;
    (line, col, at)
}

/// The text of `bytes` (borrowed when it is UTF-8), or a data error naming the file,
/// line and byte.
pub fn decode_text<'a>(name: &str, bytes: &'a [u8]) -> Result<Cow<'a, str>, StageError> {
    let utf16 = |body: &[u8], le: bool| -> Result<Cow<'a, str>, StageError> {
        utf16_text(body, le)
            .map(Cow::Owned)
            .map_err(|why| StageError::data(name, None, format!("UTF-16 text {why}")))
    };
    match bytes {
        [0xFF, 0xFE, rest @ ..] => return utf16(rest, true),
        [0xFE, 0xFF, rest @ ..] => return utf16(rest, false),
        _ => {}
    }
    let body = bytes.strip_prefix(&[0xEF, 0xBB, 0xBF]).unwrap_or(bytes);
    let head = &body[..body.len().min(512)];
    if head.len() >= 4 && head.iter().filter(|&&b| b == 0).count() * 4 >= head.len() {
        return Err(StageError::data(
            name,
            Some(1),
            "the file looks like UTF-16 without a byte-order mark; save it as UTF-8",
        ));
    }
    match std::str::from_utf8(body) {
        Ok(s) => Ok(Cow::Borrowed(s)),
        Err(e) => {
            let (line, col, at) = utf8_error_place(body, &e);
            Err(StageError::data(
                name,
                Some(line),
                format!(
                    "not valid UTF-8 text (byte 0x{:02X} at column {col}); the file may be \
                     Latin-1 or Windows-1252: save it as UTF-8",
                    body[at]
                ),
            ))
        }
    }
}

/// `s` cut to 40 characters for quoting in a message.
pub fn clip(s: &str) -> String {
    if s.chars().count() <= 40 {
        s.to_string()
    } else {
        format!("{}…", s.chars().take(40).collect::<String>())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn boms_are_decoded_and_eight_bit_text_is_refused_with_its_place() {
        let mut le = vec![0xFF, 0xFE];
        let mut be = vec![0xFE, 0xFF];
        for u in "x,y\n1,2\n".encode_utf16() {
            le.extend(u.to_le_bytes());
            be.extend(u.to_be_bytes());
        }
        assert_eq!(decode_text("f", &le).unwrap(), "x,y\n1,2\n");
        assert_eq!(decode_text("f", &be).unwrap(), "x,y\n1,2\n");
        assert_eq!(decode_text("f", b"\xEF\xBB\xBFa\n").unwrap(), "a\n");
        let e = decode_text("f.csv", b"x,y\n1,2 \xB0C\n")
            .unwrap_err()
            .to_string();
        assert!(
            e.starts_with("f.csv:2: not valid UTF-8 text (byte 0xB0 at column 5)"),
            "{e}"
        );
        let e = decode_text("f.csv", &le[2..]).unwrap_err().to_string();
        assert!(e.contains("UTF-16 without a byte-order mark"), "{e}");
        assert!(decode_text("f", &le[..5]).is_err());
        assert_eq!(clip(&"9".repeat(50)).chars().count(), 41);
    }
}
