//! Recipe files: reading, the span pass, the raw model and the include tree.
//!
//! Loading is the first half of phase one: every file of the include tree is read,
//! located ([`spans`]) and parsed into the raw model ([`raw`]) with paths checked to
//! stay inside the top recipe's folder. Nothing is resolved here.

pub mod guard;
pub mod raw;
pub mod spans;

use crate::diagnostics::{did_you_mean, Diagnostic, Problem};
use raw::RawRecipe;
use spans::{Pos, Seg, Spans};
use std::path::{Component, Path, PathBuf};

/// One recipe file of the include tree.
#[derive(Debug)]
pub struct Loaded {
    /// Canonical path of the file.
    pub abs: PathBuf,
    /// Its folder (canonical).
    pub dir: PathBuf,
    /// Path shown to people: relative to the top recipe's folder.
    pub shown: String,
    pub text: String,
    pub spans: Spans,
    pub raw: RawRecipe,
    /// Prefix of this recipe's step ids: empty for the top recipe, `xps/` for an
    /// included one (nested includes chain: `chapter/xps/`).
    pub namespace: String,
    /// Index of the including recipe, and the `set:` values it passes down, each with
    /// the path of the value in the including recipe.
    pub parent: Option<usize>,
    pub passed: Vec<(String, serde_yaml::Value, Vec<Seg>)>,
}

/// How paths may leave the recipe's folder.
#[derive(Clone, Debug)]
pub struct PathPolicy {
    /// Canonical folder of the top recipe.
    pub root: PathBuf,
    pub allow_outside: bool,
}

impl PathPolicy {
    /// Whether a canonical path may be read.
    pub fn permits(&self, canonical: &Path) -> bool {
        self.allow_outside || canonical.starts_with(&self.root)
    }
    /// Whether a path (or glob) written in a recipe in folder `base` stays inside the
    /// root, judged on its literal part (up to the first wildcard) with `..` resolved
    /// lexically. Matched files are checked again after resolving symlinks.
    pub fn written_ok(&self, base: &Path, written: &str) -> bool {
        if self.allow_outside {
            return true;
        }
        let mut p = PathBuf::new();
        for c in base.join(written).components() {
            match c {
                Component::ParentDir => {
                    p.pop();
                }
                Component::CurDir => {}
                Component::Normal(n) if n.to_string_lossy().contains(['*', '?', '[', '{']) => break,
                other => p.push(other.as_os_str()),
            }
        }
        p.starts_with(&self.root)
    }
    /// A path as shown to people: relative to the root when inside it.
    pub fn shown(&self, canonical: &Path) -> String {
        canonical
            .strip_prefix(&self.root)
            .map(|p| p.to_string_lossy().replace('\\', "/"))
            .unwrap_or_else(|_| canonical.display().to_string())
    }
}

/// Reads the top recipe and everything it includes, depth first in include order.
/// Every recipe read, with its text (also those that did not parse), for diagnostics.
pub type Sources = Vec<(String, String)>;

pub fn load_tree(
    top: &Path,
    allow_outside: bool,
) -> (Vec<Loaded>, PathPolicy, Vec<Diagnostic>, Sources) {
    let mut diags = Vec::new();
    let shown_top = top.display().to_string();
    let canonical = match top.canonicalize() {
        Ok(c) => c,
        Err(e) => {
            diags.push(Diagnostic::error(
                Problem::ReadRecipe {
                    message: e.to_string(),
                },
                Some(&shown_top),
                None,
            ));
            let policy = PathPolicy {
                root: PathBuf::from("."),
                allow_outside,
            };
            return (Vec::new(), policy, diags, Vec::new());
        }
    };
    let root = canonical
        .parent()
        .map(Path::to_path_buf)
        .unwrap_or_default();
    let policy = PathPolicy {
        root,
        allow_outside,
    };
    let mut out = Vec::new();
    let mut ctx = Ctx {
        policy: &policy,
        chain: Vec::new(),
        out: &mut out,
        diags: &mut diags,
        sources: Vec::new(),
    };
    load_one(&canonical, None, String::new(), Vec::new(), &mut ctx);
    let sources = ctx.sources;
    (out, policy, diags, sources)
}

struct Ctx<'a> {
    policy: &'a PathPolicy,
    chain: Vec<PathBuf>,
    out: &'a mut Vec<Loaded>,
    diags: &'a mut Vec<Diagnostic>,
    sources: Sources,
}

type Passed = Vec<(String, serde_yaml::Value, Vec<Seg>)>;

fn load_one(
    abs: &Path,
    parent: Option<usize>,
    prefix: String,
    passed: Passed,
    ctx: &mut Ctx,
) -> Option<usize> {
    let policy = ctx.policy;
    let shown = policy.shown(abs);
    let diags = &mut *ctx.diags;
    let text = match std::fs::read(abs) {
        Ok(bytes) => match guard::decode(&bytes) {
            Ok(t) => t,
            Err((message, pos)) => {
                diags.push(Diagnostic::error(
                    Problem::Yaml {
                        message,
                        suggestion: None,
                    },
                    Some(&shown),
                    pos,
                ));
                return None;
            }
        },
        Err(e) => {
            diags.push(Diagnostic::error(
                Problem::ReadRecipe {
                    message: e.to_string(),
                },
                Some(&shown),
                None,
            ));
            return None;
        }
    };
    ctx.sources.push((shown.clone(), text.clone()));
    if let Err((message, pos)) = guard::check(&text) {
        diags.push(Diagnostic::error(
            Problem::Yaml {
                message,
                suggestion: None,
            },
            Some(&shown),
            Some(pos),
        ));
        return None;
    }
    let spans = Spans::scan(&text);
    for d in &spans.duplicates {
        let key = match d.path.last() {
            Some(Seg::Key(k)) => k.clone(),
            _ => String::new(),
        };
        diags.push(Diagnostic::error(
            Problem::DuplicateKey {
                key,
                first_line: d.first.line,
            },
            Some(&shown),
            Some(d.at),
        ));
    }
    let raw: RawRecipe = match serde_yaml::from_str(&text) {
        Ok(r) => r,
        Err(e) => {
            let message = e.to_string();
            // serde_yaml's duplicate-key error has no useful position; ours are reported.
            if !spans.duplicates.is_empty() && message.contains("duplicate") {
                return None;
            }
            diags.push(yaml_error(&message, e.location(), &spans, &shown));
            return None;
        }
    };
    let dir = abs.parent().map(Path::to_path_buf).unwrap_or_default();
    let namespace = if parent.is_none() {
        String::new()
    } else {
        prefix
    };
    let out = &mut *ctx.out;
    let index = out.len();
    let includes = raw.include.clone();
    out.push(Loaded {
        abs: abs.to_path_buf(),
        dir: dir.clone(),
        shown: shown.clone(),
        text,
        spans,
        raw,
        namespace: namespace.clone(),
        parent,
        passed,
    });
    ctx.chain.push(abs.to_path_buf());
    for (i, inc) in includes.iter().enumerate() {
        let at = vec![Seg::key("include"), Seg::Index(i)];
        let loc = Some(ctx.out[index].spans.value(&at));
        let diags = &mut *ctx.diags;
        let (path, set, alias) = match parse_include(inc) {
            Ok(v) => v,
            Err(message) => {
                diags.push(Diagnostic::error(
                    Problem::BadInclude { message },
                    Some(&shown),
                    loc,
                ));
                continue;
            }
        };
        if !policy.written_ok(&dir, &path) {
            diags.push(Diagnostic::error(
                Problem::OutsideTree { path },
                Some(&shown),
                loc,
            ));
            continue;
        }
        let target = match dir.join(&path).canonicalize() {
            Ok(t) => t,
            Err(e) => {
                diags.push(Diagnostic::error(
                    Problem::MissingInclude {
                        path,
                        message: e.to_string(),
                    },
                    Some(&shown),
                    loc,
                ));
                continue;
            }
        };
        if !policy.permits(&target) {
            diags.push(Diagnostic::error(
                Problem::OutsideTree { path },
                Some(&shown),
                loc,
            ));
            continue;
        }
        if let Some(k) = ctx.chain.iter().position(|c| *c == target) {
            let mut names: Vec<String> = ctx.chain[k..].iter().map(|c| policy.shown(c)).collect();
            names.push(policy.shown(&target));
            diags.push(Diagnostic::error(
                Problem::IncludeCycle { chain: names },
                Some(&shown),
                loc,
            ));
            continue;
        }
        let passed: Vec<_> = set
            .into_iter()
            .map(|(k, v)| {
                let mut p = at.clone();
                p.push(Seg::key("set"));
                p.push(Seg::Key(k.clone()));
                (k, v, p)
            })
            .collect();
        // The namespace is known only once the included file is parsed (its id),
        // unless the include names one with `as`.
        let before = ctx.out.len();
        let child_prefix = alias.map(|a| format!("{namespace}{a}/"));
        let placeholder = child_prefix.clone().unwrap_or_default();
        if let Some(ci) = load_one(&target, Some(index), placeholder, passed, ctx) {
            let out = &mut *ctx.out;
            if child_prefix.is_none() {
                let id = out[ci].raw.id.clone();
                let new_prefix = format!("{namespace}{id}/");
                // Re-prefix the child and everything it included.
                for l in out.iter_mut().skip(before) {
                    l.namespace = format!("{new_prefix}{}", l.namespace);
                }
                out[ci].namespace = new_prefix;
            }
        }
    }
    ctx.chain.pop();
    Some(index)
}

/// `path` or `{ recipe: path, set: {..}, as: name }`.
type IncludeSpec = (String, Vec<(String, serde_yaml::Value)>, Option<String>);

fn parse_include(v: &serde_yaml::Value) -> Result<IncludeSpec, String> {
    use serde_yaml::Value as Y;
    match v {
        Y::String(s) => Ok((s.clone(), Vec::new(), None)),
        Y::Mapping(m) => {
            let mut path = None;
            let mut set = Vec::new();
            let mut alias = None;
            for (k, val) in m {
                match (k.as_str(), val) {
                    (Some("recipe"), Y::String(s)) => path = Some(s.clone()),
                    (Some("as"), Y::String(s)) => alias = Some(s.clone()),
                    (Some("set"), Y::Mapping(sm)) => {
                        for (sk, sv) in sm {
                            let name = sk.as_str().ok_or("`set` keys must be parameter names")?;
                            set.push((name.to_string(), sv.clone()));
                        }
                    }
                    (Some(other), _) if !["recipe", "as", "set"].contains(&other) => {
                        return Err(format!(
                            "unknown key `{other}` (an include takes `recipe`, `set` and `as`)"
                        ))
                    }
                    _ => {
                        return Err(
                            "`recipe` and `as` must be text and `set` a map of parameter values"
                                .into(),
                        )
                    }
                }
            }
            let path = path.ok_or("an include map needs `recipe: path`")?;
            Ok((path, set, alias))
        }
        _ => Err("each include is a recipe path or { recipe: path, set: {...} }".into()),
    }
}

/// A serde_yaml error, located by its own position or, for unknown fields, by the key.
fn yaml_error(
    message: &str,
    loc: Option<serde_yaml::Location>,
    spans: &Spans,
    shown: &str,
) -> Diagnostic {
    let mut text = message.to_string();
    if let Some(i) = text.rfind(" at line ") {
        text.truncate(i);
    }
    let mut pos = loc.map(|l| Pos {
        line: l.line(),
        col: l.column(),
        len: 1,
    });
    let mut suggestion = None;
    if let Some(i) = text.find("unknown field `") {
        let rest = &text[i + "unknown field `".len()..];
        if let Some(end) = rest.find('`') {
            let key = &rest[..end];
            let expected: Vec<&str> = rest[end..].split('`').skip(2).step_by(2).collect();
            suggestion = did_you_mean(key, expected.iter().copied());
            let mut path: Vec<Seg> = Vec::new();
            if i > 2 {
                for part in text[..i - 2].split('.') {
                    match part.split_once('[') {
                        Some((k, idx)) => {
                            if !k.is_empty() {
                                path.push(Seg::key(k));
                            }
                            if let Ok(n) = idx.trim_end_matches(']').parse() {
                                path.push(Seg::Index(n));
                            }
                        }
                        None => path.push(Seg::key(part)),
                    }
                }
            }
            path.push(Seg::key(key));
            let p = spans.key(&path);
            if p.line > 1 || path.len() == 1 {
                pos = Some(p);
            }
        }
    }
    Diagnostic::error(
        Problem::Yaml {
            message: text,
            suggestion,
        },
        Some(shown),
        pos,
    )
}
