//! Tests of `report.html`: a whole replay of the demo plant (renamed with
//! characters HTML must escape, its log in a folder named likewise) read
//! back by a small HTML checker: balanced elements, every plot inline,
//! nothing fetched from outside, text escaped, the caution shown, the
//! demo's documented faults listed with their clock times.

use std::path::{Path, PathBuf};

use super::escape::escape;
use crate::plot::Shade;
use crate::replay::{self, Request};

/// Elements HTML closes itself.
const VOID: [&str; 3] = ["meta", "br", "img"];

/// Checks that every element is closed in order (void elements and `/>`
/// aside), that text holds no raw `<` and only the references the report
/// writes; returns the opened element names in order.
fn check_html(doc: &str) -> Result<Vec<String>, String> {
    let mut rest = doc.strip_prefix("<!DOCTYPE html>").ok_or("no doctype")?;
    let mut stack: Vec<String> = Vec::new();
    let mut names = Vec::new();
    while let Some(i) = rest.find('<') {
        check_text(&rest[..i])?;
        let after = &rest[i + 1..];
        let end = after.find('>').ok_or("unclosed tag")?;
        let tag = &after[..end];
        rest = &after[end + 1..];
        if let Some(name) = tag.strip_prefix('/') {
            let open = stack.pop().ok_or(format!("</{name}> closes nothing"))?;
            if open != name {
                return Err(format!("<{open}> closed by </{name}>"));
            }
            continue;
        }
        let name: String = tag
            .chars()
            .take_while(|c| c.is_ascii_alphanumeric() || *c == '-')
            .collect();
        if name.is_empty() {
            return Err(format!("odd tag <{tag}>"));
        }
        check_attrs(tag)?;
        names.push(name.clone());
        if !(tag.ends_with('/') || VOID.contains(&name.as_str())) {
            stack.push(name);
        }
    }
    check_text(rest)?;
    if stack.is_empty() {
        Ok(names)
    } else {
        Err(format!("left open: {stack:?}"))
    }
}

fn check_text(t: &str) -> Result<(), String> {
    if t.contains('>') {
        return Err(format!("raw > in text {t:?}"));
    }
    let mut s = t;
    while let Some(i) = s.find('&') {
        let r = &s[i..];
        if !["&amp;", "&lt;", "&gt;", "&quot;", "&#39;", "&apos;"]
            .iter()
            .any(|e| r.starts_with(e))
        {
            return Err(format!("bare & in text {:?}", &r[..r.len().min(20)]));
        }
        s = &r[1..];
    }
    Ok(())
}

/// Attribute values are quoted and hold no raw `<`; links stay in the page.
fn check_attrs(tag: &str) -> Result<(), String> {
    if tag.contains('<') {
        return Err(format!("< inside tag <{tag}>"));
    }
    if tag.matches('"').count() % 2 != 0 {
        return Err(format!("unbalanced quotes in <{tag}>"));
    }
    for attr in ["href=\"", "src=\""] {
        if let Some(i) = tag.find(attr) {
            if !tag[i + attr.len()..].starts_with('#') {
                return Err(format!("link out of the page in <{tag}>"));
            }
        }
    }
    Ok(())
}

/// The demo plant replayed into a folder with `&<>"'` in its name, the plant
/// renamed likewise; the report's text.
fn demo_report(name: &str) -> (String, serde_json::Value, PathBuf) {
    let dir = std::env::temp_dir()
        .join(format!("holdup-report-{}-{name}", std::process::id()))
        .join("site A&B <\"north\"> 'x'");
    let _ = std::fs::remove_dir_all(&dir);
    let files = crate::demo::generate(&dir).expect("demo files");
    let toml = std::fs::read_to_string(&files.config).expect("config");
    let toml = toml.replace(
        "name = \"Brookmere R-2 saponification reactor\"",
        "name = \"R-2 <b>bold</b> & \\\"quoted\\\"\"",
    );
    assert!(
        toml.contains("<b>bold</b>"),
        "the demo config names its plant"
    );
    std::fs::write(&files.config, toml).expect("write config");
    let plant = crate::config::load(&files.config).expect("plant");
    let out = dir.join("out");
    let req = Request {
        plant: &plant,
        log: &files.log,
        lab: Some(&files.lab),
        out_dir: &out,
        output_every_ms: 0,
        progress: false,
    };
    replay::run(&req).expect("replay");
    let html = std::fs::read_to_string(out.join(super::FILE)).expect("report.html");
    let json: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(out.join("summary.json")).expect("json"))
            .expect("summary.json");
    (html, json, dir)
}

fn cleanup(dir: &Path) {
    if let Some(p) = dir.parent() {
        let _ = std::fs::remove_dir_all(p);
    }
}

#[test]
fn report_is_well_formed_self_contained_and_complete() {
    let (html, summary, dir) = demo_report("complete");
    let names = check_html(&html).unwrap_or_else(|e| panic!("report.html: {e}"));
    // Listed in the summary's outputs.
    let outputs: Vec<&str> = summary["outputs"]
        .as_array()
        .expect("outputs")
        .iter()
        .filter_map(|v| v.as_str())
        .collect();
    assert!(outputs.contains(&"report.html"), "{outputs:?}");
    // Every plot of the outputs is inline, once, whole.
    let svgs: Vec<&str> = outputs
        .iter()
        .copied()
        .filter(|f| f.ends_with(".svg"))
        .collect();
    assert_eq!(svgs.len(), 3, "{outputs:?}");
    assert_eq!(names.iter().filter(|n| *n == "svg").count(), svgs.len());
    for f in &svgs {
        let id = format!(
            "<figure class=\"plot\" id=\"plot-{}\">",
            f.trim_end_matches(".svg")
        );
        let at = html.find(&id).unwrap_or_else(|| panic!("{f} missing"));
        let fig = &html[at..];
        let fig = &fig[..fig.find("</figure>").expect("figure closed")];
        assert!(
            fig.contains("<svg xmlns=\"http://www.w3.org/2000/svg\""),
            "{f}"
        );
        assert!(fig.contains("</svg>"), "{f}");
        assert!(!fig.contains("<?xml"), "{f}: no XML prologue inside HTML");
        let file = std::fs::read_to_string(dir.join("out").join(f)).expect("svg file");
        let body = file.split_once("?>").expect("prologue").1.trim_start();
        assert!(fig.contains(body), "{f}: the file's figure, inline");
    }
    // Element ids are unique across the inlined figures.
    let mut ids: Vec<&str> = html
        .split(" id=\"")
        .skip(1)
        .filter_map(|s| s.split('"').next())
        .collect();
    let n = ids.len();
    ids.sort_unstable();
    ids.dedup();
    assert_eq!(ids.len(), n, "duplicate ids");
    // Nothing from outside: the only URL is the SVG namespace.
    assert_eq!(
        html.matches("http").count(),
        html.matches("http://www.w3.org/2000/svg").count()
    );
    assert!(!names
        .iter()
        .any(|n| n == "script" || n == "link" || n == "img"));
    // The caution, at the top and at the bottom.
    assert_eq!(
        html.matches("<p class=\"caution\" role=\"note\">").count(),
        2
    );
    let first_table = html.find("<table").expect("tables");
    assert!(html.find(crate::text::CAUTION).expect("caution") < first_table);
    // Text from the user's files is escaped: the plant's name and the path.
    assert!(!html.contains("<b>bold</b>"));
    assert!(html.contains(&escape("R-2 <b>bold</b> & \"quoted\"")));
    assert!(html.contains("site A&amp;B &lt;&quot;north&quot;&gt; &#39;x&#39;"));
    // The demo's log (demo.rs: from 2026-03-02T06:00+01:00, 05:00 UTC)
    // loses the caustic meter for two minutes at 5 h and has a
    // fifteen-minute hole at 8 h: listed with their clock times.
    let events = &html[html.find("<section id=\"events\">").expect("events")..];
    let events = &events[..events.find("</section>").expect("end")];
    for (shade, tag, at) in [
        (Shade::MissingValues, "FI-101", "2026-03-02T10:0"),
        (Shade::DataGap, "FI-101", "2026-03-02T13:"),
        (Shade::DataGap, "LI-301", "2026-03-02T13:"),
    ] {
        let row = events
            .split("<tr>")
            .find(|r| r.contains(shade.label()) && r.contains(tag) && r.contains(at));
        assert!(row.is_some(), "no {shade:?} of {tag} at {at}");
    }
    // Lab comparison with its six samples a species (every 2 h, reported
    // 45 min later, demo.rs).
    assert!(html.contains("The 18 lab results read"));
    cleanup(&dir);
}

#[test]
fn escape_covers_markup_quotes_and_controls() {
    assert_eq!(
        escape("a<b>&\"c\"'d'\u{1}"),
        "a&lt;b&gt;&amp;&quot;c&quot;&#39;d&#39;\u{FFFD}"
    );
    assert_eq!(escape("µ³ °C\tx"), "µ³ °C\tx");
}

#[test]
fn the_checker_finds_broken_pages() {
    assert!(check_html("<!DOCTYPE html><p>a</p>").is_ok());
    assert!(check_html("<!DOCTYPE html><p>a</div>").is_err());
    assert!(check_html("<!DOCTYPE html><p>a & b</p>").is_err());
    assert!(check_html("<!DOCTYPE html><p>").is_err());
    assert!(check_html("<!DOCTYPE html><a href=\"https://x\">x</a>").is_err());
}
