//! The methods paragraph: each step's methods sentence in graph order, grouped by
//! recipe, identical sentences said once, reference keys `[key]` replaced by numbers
//! in order of first use, and a closing sentence naming the software and version.

use crate::record::RunRecord;
use std::collections::BTreeMap;

/// One paragraph per recipe that has steps, and the numbered reference list.
#[derive(Clone, Debug, Default, PartialEq, serde::Serialize)]
pub struct Methods {
    pub paragraphs: Vec<Paragraph>,
    /// (number, citation), numbered from 1 in order of first use.
    pub references: Vec<Reference>,
}

#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct Paragraph {
    pub recipe: String,
    pub title: String,
    pub text: String,
}

#[derive(Clone, Debug, PartialEq, serde::Serialize)]
pub struct Reference {
    pub number: usize,
    pub key: String,
    pub citation: String,
}

impl Methods {
    /// Paragraphs and reference list as plain text (the snapshot form).
    pub fn plain_text(&self) -> String {
        let mut s = String::new();
        for p in &self.paragraphs {
            if self.paragraphs.len() > 1 && !p.title.is_empty() {
                s.push_str(&p.title);
                s.push_str("\n\n");
            }
            s.push_str(&p.text);
            s.push_str("\n\n");
        }
        if !self.references.is_empty() {
            s.push_str("References\n\n");
            for r in &self.references {
                s.push_str(&format!("[{}] {}\n", r.number, r.citation));
            }
        }
        s
    }
}

/// Every reference key of the run with its citation (the first one given).
fn citations(record: &RunRecord) -> BTreeMap<&str, &str> {
    let mut citations: BTreeMap<&str, &str> = BTreeMap::new();
    for step in &record.steps {
        for r in &step.references {
            citations
                .entry(r.key.as_str())
                .or_insert(r.citation.as_str());
        }
    }
    citations
}

impl Methods {
    /// One step's sentence with the reference numbers of this paragraph.
    pub fn numbered(&self, record: &RunRecord, sentence: &str) -> String {
        let cites = citations(record);
        let mut numbers: Vec<&str> = self
            .references
            .iter()
            .filter_map(|r| cites.get_key_value(r.key.as_str()).map(|(k, _)| *k))
            .collect();
        if sentence.trim().is_empty() {
            return String::new();
        }
        finish_sentence(&number_keys(sentence, &cites, &mut numbers))
    }
}

/// Assembles the methods paragraph from the run record.
pub fn assemble(record: &RunRecord) -> Methods {
    let citations = citations(record);
    let mut numbers: Vec<&str> = Vec::new();
    let mut said: Vec<String> = Vec::new();
    let mut paragraphs = Vec::new();
    for recipe in &record.recipes {
        let mut sentences = Vec::new();
        for step in record.steps.iter().filter(|s| s.recipe == recipe.id) {
            let raw = step.methods.trim();
            if raw.is_empty() {
                continue;
            }
            let sentence = finish_sentence(&number_keys(raw, &citations, &mut numbers));
            if !said.contains(&sentence) {
                said.push(sentence.clone());
                sentences.push(sentence);
            }
        }
        if !sentences.is_empty() {
            paragraphs.push(Paragraph {
                recipe: recipe.id.clone(),
                title: recipe.title.clone(),
                text: sentences.join(" "),
            });
        }
    }
    let recipes_used = paragraphs.len().max(1);
    let closing = format!(
        "Processing was carried out with retort {} from {} that record{} every setting \
         and the content hash of each input file.",
        record.engine_version,
        if recipes_used == 1 {
            "a recipe".to_string()
        } else {
            format!("{recipes_used} recipes")
        },
        if recipes_used == 1 { "s" } else { "" }
    );
    // One recipe: the closing sentence ends its paragraph; several: it stands alone,
    // so it does not read as part of the last recipe's methods.
    match paragraphs.last_mut() {
        Some(p) if recipes_used == 1 => {
            p.text.push(' ');
            p.text.push_str(&closing);
        }
        _ => paragraphs.push(Paragraph {
            recipe: String::new(),
            title: String::new(),
            text: closing,
        }),
    }
    let references = numbers
        .iter()
        .enumerate()
        .map(|(i, k)| Reference {
            number: i + 1,
            key: k.to_string(),
            citation: citations.get(k).copied().unwrap_or_default().to_string(),
        })
        .collect();
    Methods {
        paragraphs,
        references,
    }
}

/// Replaces `[key]` and `[key1, key2]` (`,` or `;` between keys) by reference
/// numbers; brackets holding anything else are left as written. Adjacent groups
/// `[1][2]` are merged into `[1, 2]`.
pub fn number_keys<'a>(
    sentence: &str,
    citations: &BTreeMap<&'a str, &'a str>,
    numbers: &mut Vec<&'a str>,
) -> String {
    let mut out = String::new();
    let mut rest = sentence;
    while let Some(open) = rest.find('[') {
        let Some(close) = rest[open..].find(']').map(|c| open + c) else {
            break;
        };
        let inner = &rest[open + 1..close];
        let keys: Vec<&str> = inner
            .split([',', ';'])
            .map(str::trim)
            .filter(|k| !k.is_empty())
            .collect();
        let known: Option<Vec<usize>> = keys
            .iter()
            .map(|k| {
                citations.get_key_value(*k).map(|(&key, _)| {
                    match numbers.iter().position(|n| *n == key) {
                        Some(i) => i + 1,
                        None => {
                            numbers.push(key);
                            numbers.len()
                        }
                    }
                })
            })
            .collect();
        out.push_str(&rest[..open]);
        match known {
            Some(mut nums) if !nums.is_empty() => {
                nums.sort_unstable();
                nums.dedup();
                let list = nums
                    .iter()
                    .map(|n| n.to_string())
                    .collect::<Vec<_>>()
                    .join(", ");
                if out.ends_with(']') && out.rfind('[').is_some_and(|o| is_number_group(&out[o..]))
                {
                    out.pop();
                    out.push_str(", ");
                    out.push_str(&list);
                    out.push(']');
                } else {
                    out.push('[');
                    out.push_str(&list);
                    out.push(']');
                }
            }
            _ => out.push_str(&rest[open..=close]),
        }
        rest = &rest[close + 1..];
    }
    out.push_str(rest);
    out
}

fn is_number_group(s: &str) -> bool {
    s.len() > 2
        && s.starts_with('[')
        && s.ends_with(']')
        && s[1..s.len() - 1]
            .chars()
            .all(|c| c.is_ascii_digit() || c == ',' || c == ' ')
}

/// Capital first letter and a closing full stop.
fn finish_sentence(s: &str) -> String {
    let s = s.trim();
    let mut chars = s.chars();
    let mut out: String = match chars.next() {
        Some(c) => c.to_uppercase().chain(chars).collect(),
        None => String::new(),
    };
    if !out.ends_with(['.', '!', '?']) {
        out.push('.');
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn keys_become_numbers_in_order_of_first_use() {
        let cites: BTreeMap<&str, &str> = [("a", "A."), ("b", "B."), ("c", "C.")]
            .into_iter()
            .collect();
        let mut nums = Vec::new();
        assert_eq!(
            number_keys("x [b] and y [a; b][c] but [not a key]", &cites, &mut nums),
            "x [1] and y [1, 2, 3] but [not a key]"
        );
        assert_eq!(nums, vec!["b", "a", "c"]);
    }
}
