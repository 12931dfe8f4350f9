//! The rendered report, from the invented fixture in `report_fixture`: the HTML
//! parses (html5ever through `scraper`), holds every step's figure and table, loads
//! nothing remote, escapes markup in sample names; the Markdown's image links
//! resolve; rendering is deterministic; the methods paragraph matches the reviewed
//! snapshot `tests/data/report_methods.txt` (rewrite with `RETORT_BLESS=1`).
//!
//! Set `RETORT_REPORT_KEEP=DIR` to leave the fixture's report in DIR (the browser
//! check in `tests/browser/check.sh` renders it).

mod report_fixture;

use engine::report::{self, methods};
use report_fixture::{fixture, EVIL};
use scraper::{Html, Selector};
use std::path::{Path, PathBuf};

fn render_into(dir: &Path) -> report::RenderSummary {
    let f = fixture();
    let src = f.source();
    report::render(&f.record, &src, dir, None).expect("the fixture renders")
}

fn rendered() -> (tempfile::TempDir, report::RenderSummary) {
    let dir = tempfile::tempdir().unwrap();
    let s = render_into(dir.path());
    if let Some(keep) = std::env::var_os("RETORT_REPORT_KEEP") {
        let keep = PathBuf::from(keep);
        std::fs::create_dir_all(&keep).unwrap();
        render_into(&keep);
    }
    (dir, s)
}

fn sel(s: &str) -> Selector {
    Selector::parse(s).unwrap()
}

#[test]
fn html_parses_and_shows_every_step() {
    let (dir, summary) = rendered();
    let html = std::fs::read_to_string(dir.path().join("report.html")).unwrap();
    let doc = Html::parse_document(&html);
    assert!(doc.errors.is_empty(), "HTML parse errors: {:?}", doc.errors);
    let f = fixture();
    for step in &f.record.steps {
        let id = format!(
            "s-{}-{}",
            report::sanitize(&step.recipe).to_ascii_lowercase(),
            report::sanitize(&step.id).to_ascii_lowercase()
        );
        let section = doc
            .select(&sel(&format!("section#{id}")))
            .next()
            .unwrap_or_else(|| panic!("no section for step {}", step.id));
        let figs = section.select(&sel("figure svg")).count();
        let tables = section.select(&sel("table")).count();
        assert!(
            figs + tables > 0,
            "step {} shows neither figure nor table",
            step.id
        );
    }
    // Every figure and table is written to disk and named in the page.
    assert!(
        summary.figure_errors.is_empty(),
        "{:?}",
        summary.figure_errors
    );
    assert_eq!(doc.select(&sel("figure svg")).count(), summary.figures);
    assert_eq!(
        summary.inlined, summary.figures,
        "a small report inlines every figure"
    );
    assert_eq!(
        std::fs::read_dir(dir.path().join("figures"))
            .unwrap()
            .count(),
        summary.figures
    );
    assert_eq!(
        std::fs::read_dir(dir.path().join("tables"))
            .unwrap()
            .count(),
        summary.tables
    );
    for cap in doc.select(&sel("figcaption span, caption span")) {
        let name = cap.text().collect::<String>();
        let name = name.trim_matches(|c| c == '(' || c == ')');
        assert!(dir.path().join(name).is_file(), "{name} missing");
    }
    // 3 photoelectron steps × 3 items, 2 imports + 2 Tauc + 2 peak lists + the
    // calibration, image, labels, histogram (the band-gap tables draw nothing).
    assert_eq!(summary.figures, 3 * 3 + 2 + 2 + 2 + 1 + 1 + 1 + 1);
}

#[test]
fn nothing_remote_and_no_script() {
    let (dir, _) = rendered();
    let html = std::fs::read_to_string(dir.path().join("report.html")).unwrap();
    let doc = Html::parse_document(&html);
    assert_eq!(
        doc.select(&sel("script")).count(),
        0,
        "a live script element"
    );
    assert_eq!(doc.select(&sel("link, iframe, object, embed")).count(), 0);
    let csp = doc
        .select(&sel("meta[http-equiv=\"Content-Security-Policy\"]"))
        .next()
        .expect("a CSP meta tag");
    assert_eq!(
        csp.value().attr("content"),
        Some("default-src 'none'; style-src 'unsafe-inline'; img-src data:")
    );
    for el in doc.select(&sel("*")) {
        for (name, value) in el.value().attrs() {
            let lower = value.to_ascii_lowercase();
            if name.ends_with("src") || name.ends_with("href") {
                assert!(
                    !lower.contains("http:")
                        && !lower.contains("https:")
                        && !lower.starts_with("//"),
                    "remote reference {name}={value}"
                );
            }
            assert!(!name.starts_with("on"), "event handler attribute {name}");
        }
    }
    for style in doc.select(&sel("style")) {
        let css = style.text().collect::<String>().to_ascii_lowercase();
        assert!(
            !css.contains("url(") && !css.contains("@import"),
            "CSS loads something"
        );
    }
    // The markup sample name is shown as text, never as markup.
    assert!(doc.root_element().text().collect::<String>().contains(EVIL));
    assert!(!html.contains(EVIL));
    // Every SVG figure file is well-formed enough to carry no script either.
    for e in std::fs::read_dir(dir.path().join("figures")).unwrap() {
        let svg = std::fs::read_to_string(e.unwrap().path()).unwrap();
        assert!(svg.starts_with("<svg") && svg.trim_end().ends_with("</svg>"));
        assert!(!svg.contains("<script") && !svg.contains("alert(1)</"));
    }
}

#[test]
fn failed_checks_and_failures_are_impossible_to_miss() {
    let (dir, summary) = rendered();
    assert_eq!(summary.failed_checks, 1);
    let html = std::fs::read_to_string(dir.path().join("report.html")).unwrap();
    let doc = Html::parse_document(&html);
    let banner = doc
        .select(&sel("section.alarm#failed-checks"))
        .next()
        .expect("banner");
    let text = banner.text().collect::<String>();
    assert!(text.contains("1 of 2 checks failed") && text.contains("tauc.band_gap"));
    // The banner comes before everything but the header.
    let first = html.find("id=\"failed-checks\"").unwrap();
    assert!(first < html.find("id=\"checks\"").unwrap());
    assert!(first < html.find("id=\"s-c1s-fits-raw\"").unwrap());
    let page = doc.root_element().text().collect::<String>();
    assert!(page.contains("failed: no point of the first derivative exceeds the threshold"));
    assert!(page.contains("not run: onset failed for film_c"));

    let md = std::fs::read_to_string(dir.path().join("report.md")).unwrap();
    // The cautions of the product brief close both reports.
    for text in [&page, &md] {
        assert!(text.contains("Results support, and do not replace, a qualified analyst."));
        assert!(text.contains("regulated release testing without local validation"));
        assert!(text.contains("cryogens, nanoparticle handling"));
    }
    let banner = md
        .find("check FAILED")
        .or_else(|| md.find("checks FAILED"))
        .expect("md banner");
    assert!(banner < md.find("## Checks").unwrap());
    assert!(md.contains("not run: onset failed for film\\_c"));
}

#[test]
fn markdown_links_resolve_and_markup_is_escaped() {
    let (dir, _) = rendered();
    let md = std::fs::read_to_string(dir.path().join("report.md")).unwrap();
    let mut images = 0;
    let mut rest = md.as_str();
    while let Some(i) = rest.find("![") {
        rest = &rest[i + 2..];
        let close = rest.find("](").expect("image link");
        let end = rest[close..].find(')').unwrap() + close;
        let target = &rest[close + 2..end];
        assert!(
            target.starts_with("figures/") && target.ends_with(".svg"),
            "{target}"
        );
        assert!(dir.path().join(target).is_file(), "{target} missing");
        images += 1;
        rest = &rest[end..];
    }
    assert_eq!(
        images,
        std::fs::read_dir(dir.path().join("figures"))
            .unwrap()
            .count()
    );
    // Outside fenced recipe sources, no raw markup from data.
    let outside_fences: String = md.split("```").step_by(2).collect::<Vec<_>>().join("");
    assert!(
        !outside_fences.contains("<script"),
        "raw markup in report.md"
    );
    assert!(md.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    // Pipe tables: every row of a table has as many cells as its header.
    let lines: Vec<&str> = md.lines().collect();
    for (i, l) in lines.iter().enumerate() {
        if l.starts_with("| ---") {
            let cells = |s: &str| s.replace("\\|", "").matches('|').count();
            let want = cells(lines[i - 1]);
            assert_eq!(cells(l), want, "separator of table at line {i}");
            for row in lines[i + 1..].iter().take_while(|r| r.starts_with('|')) {
                assert_eq!(cells(row), want, "row {row}");
            }
        }
    }
}

#[test]
fn rendering_is_deterministic() {
    let (a, _) = rendered();
    let (b, _) = rendered();
    for sub in ["figures", "tables"] {
        let mut names: Vec<_> = std::fs::read_dir(a.path().join(sub))
            .unwrap()
            .map(|e| e.unwrap().file_name())
            .collect();
        names.sort();
        for n in names {
            let x = std::fs::read(a.path().join(sub).join(&n)).unwrap();
            let y = std::fs::read(b.path().join(sub).join(&n)).unwrap();
            assert!(x == y, "{sub}/{n:?} differs between renders");
        }
    }
    for f in ["report.md", "report.html", "methods.txt"] {
        assert!(
            std::fs::read(a.path().join(f)).unwrap() == std::fs::read(b.path().join(f)).unwrap(),
            "{f} differs"
        );
    }
}

#[test]
fn figures_follow_the_trade_and_stay_small() {
    let (dir, _) = rendered();
    let fig = |n: &str| std::fs::read_to_string(dir.path().join("figures").join(n)).unwrap();
    // The 4000-point spectrum is decimated for drawing: the figure stays small.
    let big = fig("raw__film_a.svg");
    assert!(big.len() < 60_000, "raw__film_a.svg is {} bytes", big.len());
    assert!(big.contains("binding energy (eV)"));
    // Binding energy drawn high-to-low: the tick label 295 lies left of 280.
    let pos = |s: &str, label: &str| {
        let i = s
            .find(&format!(">\n{label}\n</text>"))
            .unwrap_or_else(|| panic!("tick {label}"));
        let tag = &s[s[..i].rfind("<text").unwrap()..i];
        let x = tag.split("x=\"").nth(1).unwrap().split('"').next().unwrap();
        x.parse::<f64>().unwrap()
    };
    assert!(pos(&big, "295") < pos(&big, "280"));
    let uv = fig("uv__film_a.svg");
    assert!(
        pos(&uv, "2.5") < pos(&uv, "4"),
        "photon energy drawn low-to-high"
    );
    // A fit has its residual panel; the Tauc plot marks its intercept.
    assert!(fig("envelope__film_a.svg").contains("residual"));
    assert!(fig("tauc__film_a.svg").contains("intercept 3.2 eV"));
    // The micrograph carries a PNG thumbnail and a scale bar in nanometres.
    let m = fig("labels__grid_01.svg");
    assert!(m.contains("href=\"data:image/png;base64,") && m.contains("100 nm"));
    // The sanitised markup name.
    assert!(dir
        .path()
        .join("figures/raw__script_alert_1_script.svg")
        .is_file());
}

#[test]
fn methods_paragraph_matches_snapshot() {
    let f = fixture();
    let text = methods::assemble(&f.record).plain_text();
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("data/report_methods.txt");
    if std::env::var_os("RETORT_BLESS").is_some() {
        std::fs::create_dir_all(path.parent().unwrap()).unwrap();
        std::fs::write(&path, &text).unwrap();
    }
    let want =
        std::fs::read_to_string(&path).expect("snapshot (run with RETORT_BLESS=1 to write it)");
    assert_eq!(
        text, want,
        "methods paragraph changed; review and rerun with RETORT_BLESS=1"
    );
    // Identical sentences are said once; every key became a number.
    assert_eq!(
        text.matches("Results were collected into one table")
            .count(),
        1
    );
    assert!(!text.contains("[shirley1972]") && text.contains("[1]"));
    assert!(text.contains("retort 0.1.0"));
    // The same text is written beside the report.
    let (dir, _) = rendered();
    assert_eq!(
        std::fs::read_to_string(dir.path().join("methods.txt")).unwrap(),
        text
    );
}

#[test]
fn template_folder_overrides_the_markdown() {
    let dir = tempfile::tempdir().unwrap();
    let tpl = tempfile::tempdir().unwrap();
    std::fs::write(tpl.path().join("report.md"), "custom: {{ title | md }}\n").unwrap();
    let f = fixture();
    let src = f.source();
    report::render(&f.record, &src, dir.path(), Some(tpl.path())).unwrap();
    assert_eq!(
        std::fs::read_to_string(dir.path().join("report.md")).unwrap(),
        "custom: Chapter 3: annealed coatings\n"
    );
    // The HTML template was not overridden.
    assert!(std::fs::read_to_string(dir.path().join("report.html"))
        .unwrap()
        .contains("<h2>Methods</h2>"));
}

#[test]
fn markup_in_svg_text_is_escaped() {
    // Axis quantities and curve names come from data; the SVG must carry them as text.
    let mut s = stages::Spectrum::new(
        vec![1.0, 2.0, 3.0],
        vec![1.0, 4.0, 2.0],
        stages::Axis::new(EVIL, "<b>eV</b>"),
        stages::Axis::new("counts & \"more\"", ""),
    );
    s.curves.push(stages::Curve {
        name: EVIL.into(),
        role: stages::CurveRole::Component,
        y: vec![0.5, 3.0, 1.0],
    });
    let svg = report::figure::spectrum_svg(&s, 1000, &[]).unwrap();
    assert!(!svg.contains("<script") && !svg.contains("<b>"));
    assert!(svg.contains("&lt;script&gt;alert(1)&lt;/script&gt;"));
    assert!(svg.contains("counts &amp; &quot;more&quot;"));
}

#[test]
fn provenance_lists_the_input_files_behind_each_result() {
    let (dir, _) = rendered();
    let html = std::fs::read_to_string(dir.path().join("report.html")).unwrap();
    let doc = Html::parse_document(&html);
    // The gathered photoelectron table depends on the three imported files.
    let prov = doc
        .select(&sel("details.prov"))
        .find(|d| d.text().collect::<String>().contains("c1s-fits__table.csv"))
        .expect("provenance of the gathered table");
    let text = prov.text().collect::<String>();
    for f in ["data/film_a.csv", "data/film_b.csv"] {
        assert!(text.contains(f), "{f} missing from the table's provenance");
    }
    assert!(text.contains("gather.table v1"));
}

#[test]
fn a_step_over_forty_files_is_one_sentence() {
    let f = report_fixture::many(40);
    let m = methods::assemble(&f.record);
    assert_eq!(m.paragraphs.len(), 1, "one recipe, one paragraph");
    let text = &m.paragraphs[0].text;
    assert_eq!(text.matches("A Shirley background").count(), 1);
    assert!(text.ends_with(
        "from a recipe that records every setting and the content hash of each input file."
    ));
    assert_eq!(m.references.len(), 3);
}

#[test]
fn an_empty_run_and_unreadable_artifacts_still_render() {
    // Nothing at all: a report that says so, not a panic.
    let mut f = fixture();
    let dir = tempfile::tempdir().unwrap();
    let empty = engine::record::RunRecord {
        recipes: vec![],
        steps: vec![],
        nodes: vec![],
        checks: vec![],
        parameters: vec![],
        ..f.record.clone()
    };
    let none = |_: &str| None;
    report::render(&empty, &none, dir.path(), None).unwrap();
    assert!(Html::parse_document(
        &std::fs::read_to_string(dir.path().join("report.html")).unwrap()
    )
    .errors
    .is_empty());
    // Every artifact missing from the cache: each node is reported, none is drawn.
    let dir = tempfile::tempdir().unwrap();
    f.artifacts.clear();
    let s = report::render(&f.record, &none, dir.path(), None).unwrap();
    assert_eq!(s.figures, 0);
    let md = std::fs::read_to_string(dir.path().join("report.md")).unwrap();
    assert!(md.contains("could not be read"));
}

#[test]
fn a_step_named_results_does_not_take_the_engines_file() {
    let mut f = fixture();
    for s in f.record.steps.iter_mut().filter(|s| s.id == "calib") {
        s.id = "results".into();
    }
    for n in f.record.nodes.iter_mut().filter(|n| n.step == "calib") {
        n.step = "results".into();
    }
    let dir = tempfile::tempdir().unwrap();
    let src = f.source();
    report::render(&f.record, &src, dir.path(), None).unwrap();
    assert!(!dir.path().join("tables/results.csv").exists());
    assert!(dir.path().join("tables/results-2.csv").is_file());
}

#[test]
fn markdown_parses_as_commonmark_with_tables() {
    // pulldown-cmark (CommonMark with the GFM table extension) stands for the
    // common converters: every pipe table is a table, every figure an image whose
    // file exists, and no data-derived text turns into raw HTML.
    use pulldown_cmark::{Event, Options, Parser, Tag, TagEnd};
    let (dir, summary) = rendered();
    let md = std::fs::read_to_string(dir.path().join("report.md")).unwrap();
    let (mut tables, mut images, mut in_code) = (0, 0, false);
    for event in Parser::new_ext(&md, Options::ENABLE_TABLES) {
        match event {
            Event::Start(Tag::Table(_)) => tables += 1,
            Event::Start(Tag::Image { dest_url, .. }) => {
                images += 1;
                assert!(dir.path().join(dest_url.as_ref()).is_file(), "{dest_url}");
            }
            Event::Start(Tag::CodeBlock(_)) => in_code = true,
            Event::End(TagEnd::CodeBlock) => in_code = false,
            Event::Html(h) | Event::InlineHtml(h) if !in_code => {
                panic!("raw HTML in report.md: {h}")
            }
            _ => {}
        }
    }
    assert_eq!(images, summary.figures);
    // Every table of the report, plus checks, chapter summary, parameters and one
    // provenance table per step.
    let f = fixture();
    assert_eq!(tables, summary.tables + 3 + f.record.steps.len());
}
