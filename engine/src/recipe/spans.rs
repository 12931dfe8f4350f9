//! Source positions for a YAML recipe, found by a small pass over the text.
//!
//! serde_yaml attaches no positions to parsed values, so errors found after parsing
//! (an unknown stage, a cycle, a bad option) are located here: every mapping key and
//! every sequence item of block and flow collections gets a line and column, keyed by
//! its path (`steps` / `smooth` / `options` / `window`). The same pass finds duplicate
//! keys, which serde_yaml reports without a useful position.
//!
//! **Invariant:** this pass only locates; it never decides what a recipe means. When
//! it cannot follow some exotic YAML (anchors, multi-line plain scalars) it records
//! less, and callers fall back to the nearest located ancestor.

use std::collections::{HashMap, HashSet};

/// A 1-based line and column (in characters) and the length of the token there.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Default)]
pub struct Pos {
    pub line: usize,
    pub col: usize,
    pub len: usize,
}

/// One step of a path into the document.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub enum Seg {
    Key(String),
    Index(usize),
}

impl Seg {
    pub fn key(k: &str) -> Seg {
        Seg::Key(k.to_string())
    }
}

#[derive(Clone, Copy, Debug, Default)]
struct Entry {
    key: Pos,
    value: Option<Pos>,
}

/// A duplicate mapping key: where it appears again and where it first appeared.
#[derive(Clone, Debug)]
pub struct Duplicate {
    pub path: Vec<Seg>,
    pub at: Pos,
    pub first: Pos,
}

/// Positions of every located key and item.
#[derive(Debug, Default)]
pub struct Spans {
    map: HashMap<Vec<Seg>, Entry>,
    pub duplicates: Vec<Duplicate>,
}

impl Spans {
    /// Position of the key at `path` (or of the nearest located ancestor).
    pub fn key(&self, path: &[Seg]) -> Pos {
        let mut p = path;
        loop {
            if let Some(e) = self.map.get(p) {
                return e.key;
            }
            match p.split_last() {
                Some((_, rest)) => p = rest,
                None => {
                    return Pos {
                        line: 1,
                        col: 1,
                        len: 1,
                    }
                }
            }
        }
    }
    /// Position of the value at `path`, else of its key, else of an ancestor.
    pub fn value(&self, path: &[Seg]) -> Pos {
        match self.map.get(path) {
            Some(e) => e.value.unwrap_or(e.key),
            None => self.key(path),
        }
    }

    /// Locates every key and item of `text`.
    pub fn scan(text: &str) -> Spans {
        let lines: Vec<Vec<char>> = text.lines().map(|l| l.chars().collect()).collect();
        let mut s = Scanner {
            lines: &lines,
            spans: Spans::default(),
            seen: HashMap::new(),
        };
        s.block();
        s.spans
    }
}

#[derive(Clone, Copy, PartialEq, Eq)]
enum Kind {
    Map,
    Seq,
    /// A key whose value starts on a later line (kind not known yet).
    Pending,
}

struct Container {
    indent: usize,
    path: Vec<Seg>,
    kind: Kind,
    next_index: usize,
}

impl Container {
    fn new(indent: usize, path: Vec<Seg>, kind: Kind) -> Self {
        Container {
            indent,
            path,
            kind,
            next_index: 0,
        }
    }
}

struct Scanner<'a> {
    lines: &'a [Vec<char>],
    spans: Spans,
    /// Keys seen per mapping path, for duplicate detection.
    seen: HashMap<Vec<Seg>, HashSet<String>>,
}

fn is_blank_or_comment(line: &[char]) -> bool {
    let t: String = line.iter().collect();
    let t = t.trim_start();
    t.is_empty() || t.starts_with('#') || t == "---" || t == "..."
}

fn indent_of(line: &[char]) -> usize {
    line.iter().take_while(|c| **c == ' ').count()
}

/// True when `line[at..]` starts a sequence item (`-` then space or end of line).
fn is_item(line: &[char], at: usize) -> bool {
    line.get(at) == Some(&'-') && line.get(at + 1).is_none_or(|c| *c == ' ')
}

impl Scanner<'_> {
    fn record(&mut self, path: Vec<Seg>, key: Pos, value: Option<Pos>) {
        self.spans.map.entry(path).or_insert(Entry { key, value });
    }

    /// Notes a key of the mapping at `parent`; returns the path to record it under
    /// (a duplicate's contents go under a path of their own, so they are not taken
    /// for duplicates of the first one's contents).
    fn note_key(&mut self, parent: &[Seg], key: &str, at: Pos) -> Vec<Seg> {
        let seen = self.seen.entry(parent.to_vec()).or_default();
        let mut path = parent.to_vec();
        path.push(Seg::key(key));
        if !seen.insert(key.to_string()) {
            let first = self.spans.key(&path);
            self.spans.duplicates.push(Duplicate {
                path: path.clone(),
                at,
                first,
            });
            path.push(Seg::Index(usize::MAX - self.spans.duplicates.len()));
        }
        path
    }

    fn block(&mut self) {
        let mut stack: Vec<Container> = vec![Container::new(0, Vec::new(), Kind::Map)];
        let mut li = 0;
        while li < self.lines.len() {
            let line = &self.lines[li];
            if is_blank_or_comment(line) {
                li += 1;
                continue;
            }
            let ind = indent_of(line);
            // Find the container this line belongs to.
            while let Some(top) = stack.last_mut() {
                match top.kind {
                    Kind::Pending => {
                        if ind > top.indent {
                            top.kind = if is_item(line, ind) {
                                Kind::Seq
                            } else {
                                Kind::Map
                            };
                            top.indent = ind;
                            break;
                        } else if ind == top.indent && is_item(line, ind) {
                            top.kind = Kind::Seq;
                            break;
                        }
                        stack.pop();
                    }
                    Kind::Map | Kind::Seq => {
                        if ind < top.indent
                            || (ind == top.indent && top.kind == Kind::Seq && !is_item(line, ind))
                        {
                            if stack.len() == 1 {
                                break;
                            }
                            stack.pop();
                        } else {
                            break;
                        }
                    }
                }
            }
            let Some(top) = stack.last() else { break };
            if ind > top.indent && top.kind == Kind::Map {
                // Continuation of a multi-line scalar: nothing to locate.
                li += 1;
                continue;
            }
            li = self.node_line(&mut stack, li, ind);
        }
    }

    /// Handles the content of line `li` starting at column `at` (0-based) inside the
    /// container on top of the stack; returns the next line to read.
    fn node_line(&mut self, stack: &mut Vec<Container>, li: usize, at: usize) -> usize {
        let line = &self.lines[li];
        let Some(top) = stack.last_mut() else {
            return li + 1;
        };
        if top.kind == Kind::Seq && is_item(line, at) {
            let idx = top.next_index;
            top.next_index += 1;
            let mut path = top.path.clone();
            path.push(Seg::Index(idx));
            let mut j = at + 1;
            while line.get(j) == Some(&' ') {
                j += 1;
            }
            if j >= line.len() || line.get(j) == Some(&'#') {
                // Item content on the following lines.
                self.record(path.clone(), pos(li, at, 1), None);
                stack.push(Container::new(at, path, Kind::Pending));
                return li + 1;
            }
            let item_pos = pos(li, j, scalar_len(line, j, false));
            self.record(path.clone(), item_pos, Some(item_pos));
            if is_item(line, j) {
                stack.push(Container::new(j, path, Kind::Seq));
                return self.node_line(stack, li, j);
            }
            if key_end(line, j).is_some() {
                stack.push(Container::new(j, path, Kind::Map));
                return self.node_line(stack, li, j);
            }
            return self.inline_value(&path, li, j, at);
        }
        if top.kind != Kind::Map {
            return li + 1;
        }
        let Some((key, kend)) = key_end(line, at) else {
            return li + 1;
        };
        let parent = top.path.clone();
        let key_pos = pos(li, at, kend - at);
        let path = self.note_key(&parent, &key, key_pos);
        let mut j = kend + 1;
        while line.get(j) == Some(&' ') {
            j += 1;
        }
        if j >= line.len() || line.get(j) == Some(&'#') {
            self.record(path.clone(), key_pos, None);
            stack.push(Container::new(at, path, Kind::Pending));
            return li + 1;
        }
        let vpos = pos(li, j, scalar_len(line, j, false));
        self.record(path.clone(), key_pos, Some(vpos));
        self.inline_value(&path, li, j, at)
    }

    /// A value starting at (li, j) on the same line as its key or item marker.
    fn inline_value(&mut self, path: &[Seg], li: usize, j: usize, owner_indent: usize) -> usize {
        let line = &self.lines[li];
        match line.get(j) {
            Some('{') | Some('[') => {
                let mut cur = (li, j);
                self.flow(path, &mut cur);
                cur.0 + 1
            }
            Some('|') | Some('>') => {
                let mut k = li + 1;
                while k < self.lines.len() {
                    let l = &self.lines[k];
                    if !is_blank_or_comment(l) && indent_of(l) <= owner_indent {
                        break;
                    }
                    k += 1;
                }
                k
            }
            _ => li + 1,
        }
    }

    fn peek(&self, cur: (usize, usize)) -> Option<char> {
        self.lines.get(cur.0).and_then(|l| l.get(cur.1)).copied()
    }

    fn skip_ws(&self, cur: &mut (usize, usize)) {
        loop {
            let Some(l) = self.lines.get(cur.0) else {
                return;
            };
            match l.get(cur.1) {
                Some(' ') | Some('\t') => cur.1 += 1,
                Some('#') | None => {
                    cur.0 += 1;
                    cur.1 = 0;
                }
                Some(_) => return,
            }
        }
    }

    /// Moves to the next entry of a flow collection closed by `close`; false at its
    /// end (the closer consumed) or at the end of the text.
    fn next_entry(&self, cur: &mut (usize, usize), close: char) -> bool {
        loop {
            self.skip_ws(cur);
            match self.peek(*cur) {
                None => return false,
                Some(c) if c == close => {
                    cur.1 += 1;
                    return false;
                }
                Some(',') => cur.1 += 1,
                Some(_) => return true,
            }
        }
    }

    /// Parses a flow collection or scalar at `cur`, recording positions under `path`.
    fn flow(&mut self, path: &[Seg], cur: &mut (usize, usize)) {
        self.skip_ws(cur);
        match self.peek(*cur) {
            Some('{') => {
                cur.1 += 1;
                while self.next_entry(cur, '}') {
                    let Some(line) = self.lines.get(cur.0) else {
                        return;
                    };
                    let start = cur.1;
                    let (key, end) = flow_key(line, start);
                    let key_pos = pos(cur.0, start, end - start);
                    let p = self.note_key(path, &key, key_pos);
                    cur.1 = end;
                    if self.peek(*cur) == Some(':') {
                        cur.1 += 1;
                        self.skip_ws(cur);
                        let Some(line) = self.lines.get(cur.0) else {
                            return;
                        };
                        let vpos = pos(cur.0, cur.1, scalar_len(line, cur.1, true));
                        self.record(p.clone(), key_pos, Some(vpos));
                        self.flow(&p, cur);
                    } else {
                        self.record(p, key_pos, None);
                    }
                }
            }
            Some('[') => {
                cur.1 += 1;
                let mut idx = 0;
                while self.next_entry(cur, ']') {
                    let Some(line) = self.lines.get(cur.0) else {
                        return;
                    };
                    let ipos = pos(cur.0, cur.1, scalar_len(line, cur.1, true));
                    let mut p = path.to_vec();
                    p.push(Seg::Index(idx));
                    idx += 1;
                    self.record(p.clone(), ipos, Some(ipos));
                    self.flow(&p, cur);
                }
            }
            Some(_) => {
                let Some(line) = self.lines.get(cur.0) else {
                    return;
                };
                cur.1 += scalar_len(line, cur.1, true).max(1);
            }
            None => {}
        }
    }
}

fn pos(line: usize, col: usize, len: usize) -> Pos {
    Pos {
        line: line + 1,
        col: col + 1,
        len: len.max(1),
    }
}

/// A block-mapping key starting at `at`: the key text and the index of its colon.
fn key_end(line: &[char], at: usize) -> Option<(String, usize)> {
    let first = *line.get(at)?;
    if first == '"' || first == '\'' {
        let close = (at + 1..line.len()).find(|&i| line[i] == first)?;
        let key: String = line[at + 1..close].iter().collect();
        let mut k = close + 1;
        while line.get(k) == Some(&' ') {
            k += 1;
        }
        return (line.get(k) == Some(&':')).then_some((key, k));
    }
    if matches!(first, '{' | '[' | '#' | '|' | '>') || (first == '-' && is_item(line, at)) {
        return None;
    }
    let mut i = at;
    while i < line.len() {
        if line[i] == ':' && line.get(i + 1).is_none_or(|c| *c == ' ') {
            let key: String = line[at..i].iter().collect();
            return Some((key.trim_end().to_string(), i));
        }
        if line[i] == '#' && i > at && line[i - 1] == ' ' {
            return None;
        }
        i += 1;
    }
    None
}

/// A key inside a flow mapping: text and the index just after it.
fn flow_key(line: &[char], at: usize) -> (String, usize) {
    if let Some(q) = line.get(at).filter(|c| **c == '"' || **c == '\'') {
        let close = (at + 1..line.len())
            .find(|&i| line[i] == *q)
            .unwrap_or(line.len());
        let key: String = line[at + 1..close.min(line.len())].iter().collect();
        return (key, (close + 1).min(line.len()));
    }
    let mut i = at;
    while i < line.len() && !matches!(line[i], ':' | ',' | '}' | ']') {
        i += 1;
    }
    let key: String = line[at..i].iter().collect();
    (key.trim_end().to_string(), i)
}

/// Length of the scalar token at `at` (quoted, or plain up to a comment or, in flow
/// context, a flow indicator). Collections count as one character.
fn scalar_len(line: &[char], at: usize, in_flow: bool) -> usize {
    match line.get(at) {
        Some('{') | Some('[') => 1,
        Some(q @ ('"' | '\'')) => (at + 1..line.len())
            .find(|&i| line[i] == *q)
            .map_or(line.len() - at, |c| c + 1 - at),
        Some(_) => {
            let mut i = at;
            while i < line.len() {
                let c = line[i];
                if in_flow && matches!(c, ',' | '}' | ']') {
                    break;
                }
                if c == '#' && i > at && line[i - 1] == ' ' {
                    break;
                }
                if c == ':' && line.get(i + 1).is_none_or(|c| *c == ' ') {
                    break;
                }
                i += 1;
            }
            let s: String = line[at..i].iter().collect();
            s.trim_end().chars().count()
        }
        None => 1,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn k(parts: &[&str]) -> Vec<Seg> {
        parts
            .iter()
            .map(|p| match p.parse::<usize>() {
                Ok(i) => Seg::Index(i),
                Err(_) => Seg::key(p),
            })
            .collect()
    }

    const DOC: &str = "id: demo\nsteps:\n  raw: { stage: import.delimited, from: spectra }\n  smooth:\n    stage: smooth.moving_average  # comment\n    from: [raw, other]\n    options:\n      window: 5\nchecks:\n  - result: smooth.x\n    item: a\n  - { result: b.y }\n";

    #[test]
    fn block_and_flow_keys_are_located() {
        let s = Spans::scan(DOC);
        assert_eq!(
            s.key(&k(&["steps", "raw"])),
            Pos {
                line: 3,
                col: 3,
                len: 3
            }
        );
        assert_eq!(
            s.value(&k(&["steps", "raw", "stage"])),
            Pos {
                line: 3,
                col: 17,
                len: 16
            }
        );
        assert_eq!(s.value(&k(&["steps", "raw", "from"])).col, 41);
        assert_eq!(
            s.value(&k(&["steps", "smooth", "stage"])),
            Pos {
                line: 5,
                col: 12,
                len: 21
            }
        );
        assert_eq!(
            s.value(&k(&["steps", "smooth", "from", "1"])),
            Pos {
                line: 6,
                col: 17,
                len: 5
            }
        );
        assert_eq!(s.key(&k(&["steps", "smooth", "options", "window"])).line, 8);
        assert_eq!(
            s.value(&k(&["checks", "0", "item"])),
            Pos {
                line: 11,
                col: 11,
                len: 1
            }
        );
        assert_eq!(s.value(&k(&["checks", "1", "result"])).line, 12);
        // Unknown paths fall back to the nearest ancestor.
        assert_eq!(s.key(&k(&["steps", "smooth", "options", "nope"])).line, 7);
        assert!(s.duplicates.is_empty());
    }

    #[test]
    fn never_panics_on_truncated_or_odd_text() {
        let odd = [
            "a: {b:",
            "a: [",
            "- - - x",
            "a: {b: [1, {c: ",
            "'q: 1",
            "a:\n  - b: {",
            "\t- x: y",
            "a: \"unterminated",
            ": x",
            "{}: [",
            "a: |",
            "- {a: 1}\n- [b",
        ];
        for text in odd {
            let _ = Spans::scan(text);
        }
        for end in 0..DOC.len() {
            let _ = Spans::scan(&DOC[..end]);
        }
    }

    proptest::proptest! {
        #[test]
        fn never_panics_on_yaml_like_noise(text in "[a-c:{}\\[\\], \n#|>'\"-]{0,80}") {
            let _ = Spans::scan(&text);
        }
    }

    #[test]
    fn duplicate_keys_are_found_with_both_positions() {
        let s = Spans::scan("steps:\n  a: { stage: x }\n  a: { stage: y, stage: z }\n");
        assert_eq!(s.duplicates.len(), 2);
        assert_eq!(s.duplicates[0].at.line, 3);
        assert_eq!(s.duplicates[0].first.line, 2);
        assert_eq!(s.duplicates[1].at.col, 18);
    }

    #[test]
    fn sequences_at_the_parent_indent_and_block_scalars() {
        let s = Spans::scan("include:\n- a.yaml\n- recipe: b.yaml\n  set: { x: 1 }\ndescription: |\n  text: not a key\nid: z\n");
        assert_eq!(s.value(&k(&["include", "0"])).line, 2);
        assert_eq!(s.value(&k(&["include", "1", "set", "x"])).line, 4);
        assert_eq!(s.key(&k(&["id"])).line, 7);
        assert_eq!(s.key(&k(&["text"])).line, 1); // not recorded: falls back to the root
    }
}
