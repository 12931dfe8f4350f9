//! Guards run on a recipe's bytes before any YAML parser sees them, so a shared
//! recipe cannot exhaust memory or time: a size limit, a nesting-depth limit, a
//! limit on aliases (the "billion laughs" expansion) and a clear word on encoding.
//!
//! The YAML parser has its own recursion and repetition limits, but deep flow
//! nesting still costs it (and the span pass) time and memory before it gives up;
//! these limits are far above anything a real recipe needs and cheap to check.

use super::spans::Pos;

/// Largest recipe file accepted.
pub const MAX_BYTES: usize = 1 << 20;
/// Deepest nesting of mappings and sequences (block indentation levels plus
/// flow brackets).
pub const MAX_DEPTH: usize = 64;
/// Most aliases (`*name`) in one recipe file.
pub const MAX_ALIASES: usize = 64;

/// Decodes a recipe file: UTF-8 (a byte-order mark is dropped) or UTF-16 with a
/// byte-order mark; anything else is refused with the place of the first bad byte.
pub fn decode(bytes: &[u8]) -> Result<String, (String, Option<Pos>)> {
    if bytes.len() > MAX_BYTES {
        return Err((
            format!(
                "the recipe is {} bytes; recipes larger than {MAX_BYTES} bytes are refused",
                bytes.len()
            ),
            None,
        ));
    }
    let utf16 = |le: bool| -> Result<String, (String, Option<Pos>)> {
        stages::import::encoding::utf16_text(&bytes[2..], le)
            .map_err(|why| (format!("the recipe is UTF-16 {why}"), None))
    };
    match bytes {
        [0xFF, 0xFE, ..] => utf16(true),
        [0xFE, 0xFF, ..] => utf16(false),
        _ => {
            let body = bytes.strip_prefix(&[0xEF, 0xBB, 0xBF]).unwrap_or(bytes);
            match std::str::from_utf8(body) {
                Ok(s) => Ok(s.to_string()),
                Err(e) => {
                    let (line, col, at) = stages::import::encoding::utf8_error_place(body, &e);
                    Err((
                        format!(
                            "the recipe is not UTF-8 (byte 0x{:02X}); save it as UTF-8",
                            body[at]
                        ),
                        Some(Pos { line, col, len: 1 }),
                    ))
                }
            }
        }
    }
}

/// Checks nesting depth and the number of aliases, skipping comments and quoted text.
pub fn check(text: &str) -> Result<(), (String, Pos)> {
    let mut indents: Vec<usize> = Vec::new();
    let mut flow = 0usize;
    let mut aliases = 0usize;
    for (i, line) in text.lines().enumerate() {
        let line_no = i + 1;
        let trimmed = line.trim_start_matches(' ');
        if flow == 0 && !trimmed.is_empty() && !trimmed.starts_with('#') {
            // Block nesting: a stack of indentations; `- ` items nest once more.
            let mut indent = line.len() - trimmed.len();
            let mut rest = trimmed;
            loop {
                while indents.last().is_some_and(|&d| d > indent) {
                    indents.pop();
                }
                if indents.last() != Some(&indent) {
                    indents.push(indent);
                }
                match rest.strip_prefix("- ") {
                    Some(r) => {
                        let r2 = r.trim_start_matches(' ');
                        indent += 2 + (r.len() - r2.len());
                        rest = r2;
                    }
                    None => break,
                }
            }
            if indents.len() + flow > MAX_DEPTH {
                return Err((
                    format!("the recipe nests deeper than {MAX_DEPTH} levels"),
                    Pos {
                        line: line_no,
                        col: indent + 1,
                        len: 1,
                    },
                ));
            }
        }
        let mut quote: Option<char> = None;
        let mut prev = ' ';
        for (col0, c) in line.chars().enumerate() {
            match quote {
                Some(q) => {
                    if c == q {
                        quote = None;
                    }
                }
                None => match c {
                    '#' if prev == ' ' || prev == '\t' => break,
                    '"' | '\'' if matches!(prev, ' ' | '\t' | '[' | '{' | ',' | ':') => {
                        quote = Some(c)
                    }
                    '[' | '{' => {
                        flow += 1;
                        if indents.len() + flow > MAX_DEPTH {
                            return Err((
                                format!("the recipe nests deeper than {MAX_DEPTH} levels"),
                                Pos {
                                    line: line_no,
                                    col: col0 + 1,
                                    len: 1,
                                },
                            ));
                        }
                    }
                    ']' | '}' => flow = flow.saturating_sub(1),
                    '*' if matches!(prev, ' ' | '\t' | '[' | '{' | ',' | ':') => {
                        aliases += 1;
                        if aliases > MAX_ALIASES {
                            return Err((
                                format!(
                                    "the recipe uses more than {MAX_ALIASES} aliases (`*name`); \
                                     refused to guard against alias expansion"
                                ),
                                Pos {
                                    line: line_no,
                                    col: col0 + 1,
                                    len: 1,
                                },
                            ));
                        }
                    }
                    _ => {}
                },
            }
            prev = c;
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ordinary_recipes_pass_and_bombs_do_not() {
        let ok = "id: a\nsteps:\n  raw: { stage: x, from: s, options: { a: [1, 2] } }\n  # [[[[ *x\n  b: \"*not [an alias\"\n";
        assert!(check(ok).is_ok());
        let deep = format!("id: d\nsteps: {}{}\n", "[".repeat(100), "]".repeat(100));
        let e = check(&deep).unwrap_err();
        assert_eq!((e.1.line, e.1.col), (2, 71));
        let mut block = String::from("id: d\n");
        for i in 0..80 {
            block.push_str(&format!("{}k{i}:\n", " ".repeat(i)));
        }
        assert!(check(&block).unwrap_err().0.contains("deeper than 64"));
        let mut bomb = String::from("a: &a [x]\n");
        for i in 0..80 {
            bomb.push_str(&format!("b{i}: *a\n"));
        }
        assert_eq!(check(&bomb).unwrap_err().1.line, 66);
    }

    #[test]
    fn encodings_are_decoded_or_refused_with_a_place() {
        let mut u16le = vec![0xFF, 0xFE];
        for u in "id: é\n".encode_utf16() {
            u16le.extend(u.to_le_bytes());
        }
        assert_eq!(decode(&u16le).unwrap(), "id: é\n");
        assert_eq!(decode(b"\xEF\xBB\xBFid: a\n").unwrap(), "id: a\n");
        let e = decode(b"id: a\nname: caf\xE9\n").unwrap_err();
        assert_eq!(e.0, "the recipe is not UTF-8 (byte 0xE9); save it as UTF-8");
        assert_eq!(e.1.map(|p| (p.line, p.col)), Some((2, 10)));
        assert!(decode(&vec![b' '; MAX_BYTES + 1]).is_err());
    }
}
