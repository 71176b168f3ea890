//! The document: head with inline CSS, the caution, a table of contents,
//! the sections and the plots (inline SVG, their XML prologue dropped).

use std::fmt::Write as _;

use super::escape::push_escaped;
use super::tables;
use super::Report;
use crate::plot::Shade;
use crate::text::CAUTION;

const CSS: &str = "\
body{font-family:'DejaVu Sans',Verdana,Arial,sans-serif;margin:0 auto;max-width:1000px;padding:0 16px 40px;color:#111;background:#fff;line-height:1.4}
h1{font-size:1.5em;margin:18px 0 8px}h2{font-size:1.2em;margin:28px 0 8px;border-bottom:1px solid #ccc}
.caution{border:2px solid #b35900;background:#fff4e5;padding:10px 14px;font-size:1.05em;margin:12px 0}
table{border-collapse:collapse;margin:8px 0;font-size:.9em}
th,td{border:1px solid #d0d0d0;padding:3px 8px;text-align:left;vertical-align:top}
thead th{background:#f2f2f2}td.num{text-align:right;font-variant-numeric:tabular-nums}
table.pairs th{background:#f7f7f7;font-weight:normal;color:#333}
.swatch{display:inline-block;width:14px;height:10px;margin-right:6px;border:1px solid #999;opacity:.8}
figure{margin:16px 0}figure svg{display:block;max-width:100%;height:auto;border:1px solid #e5e5e5}
figcaption{font-size:.85em;color:#444;margin-top:4px}
nav ul{columns:3;font-size:.9em}code{font-size:.95em}
";

/// Sections: anchor and heading.
const SECTIONS: [(&str, &str); 10] = [
    ("run", "Run"),
    ("log", "Log"),
    ("inputs", "Inputs, kernel and status"),
    ("estimator", "Estimator and meters"),
    ("closure", "Balance closure"),
    ("lab", "Lab and analyser comparison"),
    ("events", "Faults and alarms"),
    ("plots", "Plots"),
    ("final", "Final state"),
    ("outputs", "Files"),
];

/// The whole page.
pub(super) fn render(r: &Report<'_>) -> String {
    let plots: usize = r.plots.iter().map(|p| p.svg.len()).sum();
    let mut out = String::with_capacity(32 * 1024 + plots);
    out.push_str("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n");
    out.push_str("<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n");
    out.push_str("<meta name=\"generator\" content=\"holdup replay\">\n<title>");
    push_escaped(&mut out, &format!("holdup replay: {}", r.summary.plant));
    out.push_str("</title>\n<style>\n");
    out.push_str(CSS);
    out.push_str("</style>\n</head>\n<body>\n<header>\n<h1>");
    push_escaped(&mut out, &format!("Replay of {}", r.summary.plant));
    out.push_str("</h1>\n");
    caution(&mut out);
    out.push_str("</header>\n<nav><ul>\n");
    for (id, title) in SECTIONS {
        let _ = writeln!(out, "<li><a href=\"#{id}\">{title}</a></li>");
    }
    out.push_str("</ul></nav>\n<main>\n");
    for (id, title) in SECTIONS {
        let _ = writeln!(out, "<section id=\"{id}\">\n<h2>{title}</h2>");
        match id {
            "run" => tables::run(&mut out, r),
            "log" => tables::log(&mut out, r),
            "inputs" => tables::inputs_and_status(&mut out, r),
            "estimator" => tables::estimator(&mut out, r),
            "closure" => tables::closure(&mut out, r),
            "lab" => tables::comparisons(&mut out, r),
            "events" => tables::events(&mut out, r),
            "plots" => plots_section(&mut out, r),
            "final" => tables::final_state(&mut out, r),
            _ => outputs(&mut out, r),
        }
        out.push_str("</section>\n");
    }
    out.push_str("</main>\n<footer>\n");
    caution(&mut out);
    out.push_str("</footer>\n</body>\n</html>\n");
    out
}

fn caution(out: &mut String) {
    out.push_str("<p class=\"caution\" role=\"note\"><strong>Caution.</strong> ");
    push_escaped(out, CAUTION);
    out.push_str("</p>\n");
}

/// The figures, each inline, with the shaded kinds' meaning.
fn plots_section(out: &mut String, r: &Report<'_>) {
    out.push_str("<p>Shaded windows (the same colour means the same in every report; a panel is shaded only for the signals it draws, and a closure alarm shades the holdup, flow and bias panels):</p>\n<ul>\n");
    for s in Shade::ALL {
        out.push_str("<li>");
        out.push_str(&tables::swatch(s));
        out.push_str("</li>\n");
    }
    out.push_str("</ul>\n");
    for p in r.plots {
        let id = p.file.trim_end_matches(".svg");
        out.push_str("<figure class=\"plot\" id=\"plot-");
        push_escaped(out, id);
        out.push_str("\">\n");
        let svg = match p.svg.strip_prefix("<?xml") {
            Some(rest) => rest.split_once("?>").map_or(rest, |(_, b)| b).trim_start(),
            None => p.svg.as_str(),
        };
        out.push_str(svg);
        out.push_str("<figcaption>");
        push_escaped(out, &format!("{} ({})", p.title, p.file));
        out.push_str("</figcaption>\n</figure>\n");
    }
}

/// The files of the output folder.
fn outputs(out: &mut String, r: &Report<'_>) {
    out.push_str("<ul>\n");
    for f in &r.summary.outputs {
        out.push_str("<li><code>");
        push_escaped(out, f);
        out.push_str("</code></li>\n");
    }
    out.push_str("</ul>\n");
}
