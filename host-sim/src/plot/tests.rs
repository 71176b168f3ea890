//! Tests of the figures: decimation bounds, axes, escaping, and whole
//! documents checked by a small XML checker.

use super::axis::{nice_axis, value_label, Axis, Range};
use super::legend::legend_rows;
use super::markup::{push_esc, N};
use super::series::{Bucket, Pt};
use super::svg::{W, Y_PAD, Y_SLACK};
use super::*;

const CAUTION: &str = "Estimates are advisory: validate against lab results; not for use as the only input to a safety function.";

/// An element as the checker saw it.
#[derive(Debug)]
struct Elem {
    name: String,
    attrs: Vec<(String, String)>,
}

/// Unescapes the five predefined entities; any other `&` is an error.
fn unescape(s: &str) -> Result<String, String> {
    let mut out = String::new();
    let mut rest = s;
    while let Some(i) = rest.find('&') {
        out.push_str(&rest[..i]);
        let tail = &rest[i..];
        let (rep, len) = [
            ("&amp;", '&'),
            ("&lt;", '<'),
            ("&gt;", '>'),
            ("&quot;", '"'),
            ("&apos;", '\''),
        ]
        .iter()
        .find(|(e, _)| tail.starts_with(e))
        .map(|(e, c)| (*c, e.len()))
        .ok_or_else(|| format!("bad entity at {:?}", &tail[..tail.len().min(12)]))?;
        out.push(rep);
        rest = &tail[len..];
    }
    out.push_str(rest);
    Ok(out)
}

fn is_name_char(c: char) -> bool {
    c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | ':' | '.')
}

/// A minimal XML well-formedness check: prologue, balanced tags, quoted
/// and unique attributes, valid entities, no stray `<`, one root. Returns
/// the elements and the unescaped text nodes.
fn check_xml(doc: &str) -> Result<(Vec<Elem>, Vec<String>), String> {
    let prologue = "<?xml version=\"1.0\" encoding=\"UTF-8\"?>";
    let mut rest = doc.strip_prefix(prologue).ok_or("missing UTF-8 prologue")?;
    let mut stack: Vec<String> = Vec::new();
    let mut elems = Vec::new();
    let mut texts = Vec::new();
    let mut roots = 0;
    while !rest.is_empty() {
        let lt = rest.find('<').unwrap_or(rest.len());
        let t = &rest[..lt];
        if stack.is_empty() && !t.trim().is_empty() {
            return Err(format!("text outside root: {t:?}"));
        }
        if t.contains('>') {
            return Err(format!("raw '>' in text {t:?}"));
        }
        let t = unescape(t)?;
        if !t.trim().is_empty() {
            texts.push(t);
        }
        rest = &rest[lt..];
        if rest.is_empty() {
            break;
        }
        if let Some(r) = rest.strip_prefix("</") {
            let end = r.find('>').ok_or("unclosed end tag")?;
            let name = r[..end].trim();
            match stack.pop() {
                Some(open) if open == name => {}
                other => return Err(format!("</{name}> closes {other:?}")),
            }
            rest = &r[end + 1..];
            continue;
        }
        let r = &rest[1..];
        let name_len = r.find(|c: char| !is_name_char(c)).unwrap_or(r.len());
        if name_len == 0 {
            return Err(format!("bad tag at {:?}", &rest[..rest.len().min(20)]));
        }
        let name = r[..name_len].to_owned();
        let mut r = &r[name_len..];
        let mut attrs: Vec<(String, String)> = Vec::new();
        let self_closing;
        loop {
            let trimmed = r.trim_start();
            let had_space = trimmed.len() < r.len();
            r = trimmed;
            if let Some(x) = r.strip_prefix("/>") {
                self_closing = true;
                r = x;
                break;
            }
            if let Some(x) = r.strip_prefix('>') {
                self_closing = false;
                r = x;
                break;
            }
            if !had_space {
                return Err(format!("attribute without space in <{name}>"));
            }
            let an = r.find(|c: char| !is_name_char(c)).unwrap_or(r.len());
            if an == 0 {
                return Err(format!(
                    "bad attribute in <{name}>: {:?}",
                    &r[..r.len().min(20)]
                ));
            }
            let aname = r[..an].to_owned();
            let x = r[an..]
                .strip_prefix("=\"")
                .ok_or(format!("unquoted {aname}"))?;
            let q = x.find('"').ok_or("unterminated attribute")?;
            let raw = &x[..q];
            if raw.contains('<') {
                return Err(format!("'<' in attribute {aname}"));
            }
            if attrs.iter().any(|(n, _)| *n == aname) {
                return Err(format!("duplicate attribute {aname}"));
            }
            attrs.push((aname, unescape(raw)?));
            r = &x[q + 1..];
        }
        if stack.is_empty() {
            roots += 1;
        }
        if !self_closing {
            stack.push(name.clone());
        }
        elems.push(Elem { name, attrs });
        rest = r;
    }
    if !stack.is_empty() {
        return Err(format!("unclosed {stack:?}"));
    }
    if roots != 1 {
        return Err(format!("{roots} roots"));
    }
    Ok((elems, texts))
}

/// Attributes that hold numbers; each must parse to finite values.
fn check_numbers(elems: &[Elem]) -> Result<(), String> {
    const NUMERIC: [&str; 15] = [
        "x",
        "y",
        "x1",
        "x2",
        "y1",
        "y2",
        "cx",
        "cy",
        "r",
        "width",
        "height",
        "points",
        "viewBox",
        "stroke-width",
        "font-size",
    ];
    for e in elems {
        for (n, v) in &e.attrs {
            if !NUMERIC.contains(&n.as_str()) {
                continue;
            }
            for tok in v.split([' ', ',']).filter(|t| !t.is_empty()) {
                match tok.parse::<f64>() {
                    Ok(f) if f.is_finite() => {}
                    _ => return Err(format!("<{}> {n}={v:?}", e.name)),
                }
            }
        }
    }
    Ok(())
}

/// The document without its text nodes (titles and legends may
/// legitimately say "inflow"), for the NaN/inf check on numbers.
fn markup_only(svg: &str) -> String {
    let mut out = String::new();
    let mut in_tag = false;
    for c in svg.chars() {
        match c {
            '<' => in_tag = true,
            '>' => in_tag = false,
            _ if in_tag => out.push(c),
            _ => {}
        }
    }
    out
}

fn no_non_finite(svg: &str) -> bool {
    let m = markup_only(svg).to_ascii_lowercase();
    !m.contains("nan") && !m.contains("inf")
}

fn polylines(svg: &str) -> usize {
    svg.matches("<polyline").count()
}

/// xorshift64*, for reproducible noise.
struct Rng(u64);
impl Rng {
    fn next(&mut self) -> f64 {
        self.0 ^= self.0 >> 12;
        self.0 ^= self.0 << 25;
        self.0 ^= self.0 >> 27;
        (self.0.wrapping_mul(0x2545_F491_4F6C_DD1D) >> 11) as f64 / (1u64 << 53) as f64
    }
}

#[test]
fn decimation_keeps_spikes_within_bound() {
    let mut s = Series::new("flow", Color::Blue);
    let n = 1_000_000u32;
    let mut peak_buckets = 0;
    for i in 0..n {
        let x = f64::from(i) * 0.001;
        // Spikes at the start, middle and end of their final buckets
        // (512 samples each at the end): 876_544 = 1712 × 512.
        let y = match i {
            123_457 => 1000.0,
            876_543 => -1000.0,
            876_544 => 2000.0,
            500_100 => -2000.0,
            _ => (x * 0.7).sin(),
        };
        s.push(x, y);
        peak_buckets = peak_buckets.max(s.buckets());
    }
    assert_eq!(s.len(), n as usize);
    assert!(peak_buckets <= MAX_BUCKETS, "{peak_buckets} buckets");
    assert!(s.kept() <= 4 * MAX_BUCKETS, "{} points", s.kept());
    // The data has 1e6 samples; the kept set must be a real reduction.
    assert!(s.kept() < 10_000);
    let ys: Vec<f64> = s.points().map(|p| p.y).collect();
    for spike in [1000.0, -1000.0, 2000.0, -2000.0] {
        assert!(ys.contains(&spike), "spike {spike} lost");
    }
    // Ends survive, arrival order is kept, no break was invented.
    let pts: Vec<Pt> = s.points().collect();
    assert_eq!(pts[0].x, 0.0);
    assert_eq!(pts[pts.len() - 1].x, f64::from(n - 1) * 0.001);
    assert!(pts.windows(2).all(|w| w[0].x < w[1].x));
    assert!(pts.iter().all(|p| !p.brk));
}

/// Brute force: every bucket keeps the first, min, max and last of
/// exactly the raw samples it covers.
#[test]
fn each_bucket_keeps_first_min_max_last_of_its_run() {
    for cap in [2usize, 7, 16, 100] {
        let mut rng = Rng(cap as u64 + 1);
        let raw: Vec<f64> = (0..20_000).map(|_| rng.next() * 100.0).collect();
        let mut s = Series::with_max_buckets("s", Color::Blue, cap);
        for (i, &y) in raw.iter().enumerate() {
            s.push(i as f64, y);
        }
        let mut start = 0usize;
        for b in &s.buckets {
            let run = &raw[start..start + b.count as usize];
            let ys: Vec<f64> = b.points().iter().map(|p| p.y).collect();
            let min = run.iter().copied().fold(f64::INFINITY, f64::min);
            let max = run.iter().copied().fold(f64::NEG_INFINITY, f64::max);
            assert_eq!(b.points()[0].x, start as f64);
            assert_eq!(ys[0], run[0]);
            assert_eq!(ys[ys.len() - 1], run[run.len() - 1]);
            assert!(ys.contains(&min) && ys.contains(&max), "cap {cap}");
            start += run.len();
        }
        assert_eq!(start, raw.len());
    }
}

#[test]
fn coordinates_are_never_non_finite() {
    assert_eq!(N(f64::NAN).to_string(), "0");
    assert_eq!(N(f64::INFINITY).to_string(), "0");
    assert_eq!(N(-0.04).to_string(), "0");
    assert_eq!(N(12.25).to_string(), "12.3");
    assert_eq!(N(7.0).to_string(), "7");
}

#[test]
fn memory_stays_bounded() {
    let mut s = Series::new("flow", Color::Blue);
    for i in 0..3_000_000u32 {
        s.push(f64::from(i), f64::from(i % 1000));
    }
    let bytes = s.buckets.capacity() * std::mem::size_of::<Bucket>();
    assert!(bytes <= 224 * 1024, "{bytes} bytes");
}

#[test]
fn small_bucket_bound_is_respected_at_every_push() {
    for cap in [2usize, 3, 5, 16] {
        let mut s = Series::with_max_buckets("s", Color::Green, cap);
        let mut rng = Rng(7);
        for i in 0..10_000 {
            s.push(f64::from(i), rng.next());
            assert!(s.buckets() <= cap && s.kept() <= 4 * cap);
        }
    }
}

#[test]
fn short_series_is_kept_exactly() {
    let mut s = Series::new("s", Color::Blue);
    for i in 0..3000 {
        s.push(f64::from(i), f64::from(i % 7));
    }
    // 3000 samples fit 1000 buckets of 4 (one merge): nothing is lost.
    assert_eq!(s.kept(), 3000);
}

#[test]
fn nan_breaks_the_line_even_after_decimation() {
    let mut s = Series::new("level", Color::Blue);
    for i in 0..10 {
        s.push(f64::from(i), 1.0);
    }
    s.push(10.0, f64::NAN);
    for i in 11..20 {
        s.push(f64::from(i), 2.0);
    }
    s.push(20.0, f64::INFINITY);
    s.push(21.0, 3.0);
    let mut p = Panel::new("level [m]");
    p.series.push(s);
    let fig = Figure {
        panels: vec![p],
        ..Figure::default()
    };
    let svg = fig.to_svg();
    assert_eq!(polylines(&svg), 2, "two runs as lines");
    assert!(
        svg.contains(r#"r="2.5""#),
        "isolated last point drawn as a dot"
    );

    // One NaN in 200,000 samples, merged many times over.
    let mut s = Series::with_max_buckets("s", Color::Blue, 64);
    for i in 0..200_000 {
        let y = if i == 77_777 { f64::NAN } else { 1.0 };
        s.push(f64::from(i), y);
    }
    let breaks = s.points().filter(|p| p.brk).count();
    assert_eq!(breaks, 1);
    let mut p = Panel::new("y");
    p.series.push(s);
    let svg = Figure {
        panels: vec![p],
        ..Figure::default()
    }
    .to_svg();
    assert_eq!(polylines(&svg), 2);
}

fn axis(lo: f64, hi: f64) -> Axis {
    let mut r = Range::new();
    r.add(lo);
    r.add(hi);
    nice_axis(r, 5, Y_SLACK, Y_PAD)
}

fn assert_good_axis(a: &Axis, lo: f64, hi: f64) {
    assert!(a.lo.is_finite() && a.hi.is_finite() && a.lo < a.hi, "{a:?}");
    if lo.is_finite() && hi.is_finite() {
        assert!(
            a.lo <= lo && a.hi >= hi,
            "{a:?} does not cover [{lo}, {hi}]"
        );
    }
    assert!(a.ticks.len() >= 2 && a.ticks.len() <= 12, "{a:?}");
    assert!(a.ticks.iter().all(|t| *t >= a.lo && *t <= a.hi), "{a:?}");
    // Step is 1, 2 or 5 times a power of ten.
    let e = a.step.log10().floor();
    let m = a.step / 10f64.powf(e);
    assert!(
        [1.0, 2.0, 5.0, 10.0].iter().any(|k| (m - k).abs() < 1e-9),
        "step {} ({m})",
        a.step
    );
    let mut l = a.labels.clone();
    l.dedup();
    assert_eq!(l.len(), a.labels.len(), "repeated labels {:?}", a.labels);
    assert!(a
        .labels
        .iter()
        .all(|l| !l.starts_with("-0") || l.len() > 2 && l.as_bytes()[2] == b'.'));
    for l in &a.labels {
        let v: f64 = l
            .parse()
            .unwrap_or_else(|_| panic!("label {l:?} is not a number"));
        assert!(v.is_finite());
    }
}

#[test]
fn nice_ticks_for_typical_and_odd_ranges() {
    let a = axis(0.0, 1.0);
    assert_good_axis(&a, 0.0, 1.0);
    assert_eq!(a.labels, ["0", "0.2", "0.4", "0.6", "0.8", "1.0"]);

    let a = axis(0.0013, 0.0021);
    assert_good_axis(&a, 0.0013, 0.0021);
    assert_eq!(a.step, 0.0002);
    assert_eq!(a.labels.first().map(String::as_str), Some("0.0012"));

    let a = axis(-5.0, 1e6);
    assert_good_axis(&a, -5.0, 1e6);
    assert!(a.labels.contains(&"0".to_owned()));
    assert!(a.labels.contains(&"1000000".to_owned()));
    // -5 must not drag the axis down a whole step of 200,000.
    assert!(a.lo > -100_000.0, "{a:?}");

    for (lo, hi) in [
        (3.0, 3.0),
        (0.0, 0.0),
        (-1e-300, -1e-300),
        (1e15, 1e15 + 1.0),
        (-f64::MAX, f64::MAX),
        (1e8, 1e8 + 1e-3),
        (1e-9, 3e-9),
        (-7.5, -7.2),
    ] {
        let a = axis(lo, hi);
        assert_good_axis(&a, lo.clamp(-LIMIT, LIMIT), hi.clamp(-LIMIT, LIMIT));
    }
    let a = axis(3.0, 3.0);
    assert!(a.ticks.iter().any(|t| (t - 3.0).abs() < 1e-12), "{a:?}");

    // NaN-only and empty input: the default axis.
    let mut r = Range::new();
    r.add(f64::NAN);
    r.add(f64::INFINITY);
    let a = nice_axis(r, 5, Y_SLACK, Y_PAD);
    assert_good_axis(&a, 0.0, 1.0);
    assert_eq!((a.lo, a.hi), (0.0, 1.0));
}

#[test]
fn value_labels_read_well() {
    assert_eq!(value_label(12.34), "12.34");
    assert_eq!(value_label(1.5), "1.5");
    assert_eq!(value_label(850.26), "850.3");
    assert_eq!(value_label(0.01234), "0.01234");
    assert_eq!(value_label(-0.0), "0");
    assert_eq!(value_label(2.5e7), "2.5e7");
    assert_eq!(value_label(-0.00001), "-1e-5");
    assert_eq!(value_label(f64::NAN), "");
}

#[test]
fn escaping_and_forbidden_characters() {
    let mut s = String::new();
    push_esc(&mut s, "a<b & c>\"d\" 'e' \u{1}\u{FFFF} m³ °C");
    assert_eq!(
        s,
        "a&lt;b &amp; c&gt;&quot;d&quot; &apos;e&apos; \u{FFFD}\u{FFFD} m³ °C"
    );
}

#[test]
fn checker_rejects_broken_xml() {
    let p = "<?xml version=\"1.0\" encoding=\"UTF-8\"?>";
    assert!(check_xml(&format!("{p}<a><b></a></b>")).is_err());
    assert!(check_xml(&format!("{p}<a>x & y</a>")).is_err());
    assert!(check_xml(&format!("{p}<a x=1/>")).is_err());
    assert!(check_xml(&format!("{p}<a x=\"1\" x=\"2\"/>")).is_err());
    assert!(check_xml(&format!("{p}<a/><b/>")).is_err());
    assert!(check_xml(&format!("{p}<a>")).is_err());
    assert!(check_xml("<a/>").is_err());
    let (e, t) = check_xml(&format!("{p}<a k=\"&lt;\"><b/>x &amp; y</a>")).unwrap();
    assert_eq!(e.len(), 2);
    assert_eq!(e[0].attrs[0].1, "<");
    assert_eq!(t, ["x & y"]);
    let bad = vec![Elem {
        name: "line".into(),
        attrs: vec![("x1".into(), "NaN".into())],
    }];
    assert!(check_numbers(&bad).is_err());
}

/// Three panels sharing time: flows, holdup with lab results, and a
/// temperature; 72 h at 10 s, with a gap, a flat-lined meter, a spike.
fn example_figure() -> Figure {
    let mut rng = Rng(0x9E37_79B9_7F4A_7C15);
    let mut fin = Series::new("FI-101 inflow", Color::Blue);
    let mut fout = Series::new("FI-102 outflow", Color::Vermillion);
    let mut est = Series::new("holdup estimate", Color::Blue);
    let mut lvl = Series::new("holdup from level LI-103", Color::Green);
    let mut temp = Series::new("TI-104", Color::Purple);
    let dt = 10.0 / 3600.0;
    for i in 0..(72 * 360) {
        let t = f64::from(i) * dt;
        let gap = (30.0..34.0).contains(&t);
        let flat = (50.0..58.0).contains(&t);
        // Holdup 20 ± 4 m³; outflow is inflow minus d(holdup)/dt.
        let holdup = 20.0 + 4.0 * (t / 9.0).sin() + 0.05 * t;
        let qin_true = 12.0 + 3.0 * (t / 7.0).sin();
        let qin = if flat {
            11.8
        } else {
            qin_true + 0.3 * (rng.next() - 0.5)
        };
        let mut qout = qin_true - (4.0 / 9.0) * (t / 9.0).cos() - 0.05 + 0.3 * (rng.next() - 0.5);
        if i == 15_000 {
            qout = 24.0;
        }
        if gap {
            for s in [&mut fin, &mut fout, &mut est, &mut lvl, &mut temp] {
                s.push(t, f64::NAN);
            }
            continue;
        }
        fin.push(t, qin);
        fout.push(t, qout);
        est.push(t, holdup);
        lvl.push(
            t,
            holdup + 0.9 + 0.5 * (t / 2.5).sin() + 0.1 * (rng.next() - 0.5),
        );
        temp.push(t, 61.0 + 1.5 * (t / 11.0).cos() + 0.04 * (rng.next() - 0.5));
    }
    let mut lab = Markers::new("lab sample", Color::Black);
    for (t, v) in [(6.0, 22.9), (18.5, 24.42), (42.0, 17.3), (66.25, 22.05)] {
        lab.push(t, v);
    }
    let gap = Band::new(30.0, 34.0, Shade::DataGap);
    let flat = Band::new(50.0, 58.0, Shade::FlatLine);
    Figure {
        title: "Replay of tank T-1: holdup estimate vs. level and lab".into(),
        x_label: time_axis_label("2024-03-05T06:00:00Z"),
        panels: vec![
            Panel {
                y_label: "flow [m³/h]".into(),
                series: vec![fin, fout],
                markers: vec![],
                bands: vec![gap, flat],
                hlines: vec![],
            },
            Panel {
                y_label: "holdup [m³]".into(),
                series: vec![est, lvl],
                markers: vec![lab],
                bands: vec![gap, flat],
                hlines: vec![
                    (28.0, "high limit 28 m³".into()),
                    (12.0, "low limit 12 m³".into()),
                ],
            },
            Panel {
                y_label: "temperature [°C]".into(),
                series: vec![temp],
                markers: vec![],
                bands: vec![gap],
                hlines: vec![],
            },
        ],
        footer: CAUTION.into(),
        ..Figure::default()
    }
}

#[test]
fn example_figure_is_well_formed_and_complete() {
    let fig = example_figure();
    let svg = fig.to_svg();
    let (elems, texts) = check_xml(&svg).unwrap();
    check_numbers(&elems).unwrap();
    assert!(no_non_finite(&svg));
    let has = |s: &str| texts.iter().any(|t| t == s);
    for s in [
        fig.title.as_str(),
        "time since 2024-03-05T06:00:00Z [h]",
        "flow [m³/h]",
        "holdup [m³]",
        "temperature [°C]",
        "FI-101 inflow",
        "FI-102 outflow",
        "holdup estimate",
        "holdup from level LI-103",
        "lab sample",
        Shade::DataGap.label(),
        Shade::FlatLine.label(),
        "high limit 28 m³",
        "24.42",
    ] {
        assert!(has(s), "missing text {s:?}");
    }
    // The footer may be wrapped: its words, in order, are all there.
    let footer: Vec<&str> = texts
        .iter()
        .filter(|t| CAUTION.contains(t.as_str()))
        .map(String::as_str)
        .collect();
    assert_eq!(footer.join(" "), CAUTION);
    // Gap in the log breaks each of the five lines once.
    assert_eq!(polylines(&svg), 10);
    // Same data, same bytes.
    assert_eq!(svg, example_figure().to_svg());
    if let Some(path) = std::env::var_os("HOLDUP_PLOT_EXAMPLE") {
        fig.write(Path::new(&path)).unwrap();
    }
}

#[test]
fn hostile_data_never_panics_or_leaks_non_finite_numbers() {
    let mut cases: Vec<Vec<(f64, f64)>> = vec![
        vec![],
        vec![(1.0, 2.0)],
        vec![(f64::NAN, f64::NAN); 10],
        vec![(0.0, 5.0), (1.0, 5.0), (2.0, 5.0)],
        vec![(0.0, f64::MAX), (1.0, -f64::MAX), (2.0, f64::INFINITY)],
        vec![(f64::NEG_INFINITY, 1.0), (f64::INFINITY, 2.0), (3.0, 3.0)],
        vec![(-1e300, 1e-300), (1e300, -1e-300)],
        vec![(5.0, 1.0), (5.0, 1.0)],
        vec![(1e15, 0.0), (1e15 + 1e-3, 1.0)],
    ];
    cases.push(
        (0..500)
            .map(|i| (f64::from(i % 3), f64::from(i).sin()))
            .collect(),
    );
    for (ci, pts) in cases.iter().enumerate() {
        let mut s = Series::new("a & <b>", Color::nth(ci));
        let mut m = Markers::new("lab \"x\"", Color::nth(ci + 1));
        for &(x, y) in pts {
            s.push(x, y);
            m.push(x, y);
        }
        let panel = Panel {
            y_label: "y ['u']".into(),
            series: vec![s, Series::new("empty", Color::Yellow)],
            markers: vec![m],
            bands: vec![
                Band::new(f64::NAN, 1.0, Shade::DataGap),
                Band::new(2.0, 2.0, Shade::MoreOutThanIn),
                Band::new(3.0, -1.0, Shade::InputNotGood),
            ],
            hlines: vec![(f64::NAN, "nan line".into()), (f64::MAX, "max".into())],
        };
        for panels in [vec![], vec![panel.clone()], vec![panel; 6]] {
            let fig = Figure {
                title: "t < & >".into(),
                x_label: "x".into(),
                panels,
                footer: "f\u{0}oot\ner".into(),
                ..Figure::default()
            };
            let svg = fig.to_svg();
            let (elems, texts) = check_xml(&svg).unwrap_or_else(|e| panic!("case {ci}: {e}"));
            check_numbers(&elems).unwrap_or_else(|e| panic!("case {ci}: {e}"));
            assert!(no_non_finite(&svg), "case {ci}");
            assert!(texts.iter().any(|t| t == "t < & >"));
            assert!(texts.iter().any(|t| t == "f\u{FFFD}oot"));
        }
    }
}

#[test]
fn empty_figure_says_no_data() {
    let svg = Figure::default().to_svg();
    let (_, texts) = check_xml(&svg).unwrap();
    assert!(texts.iter().any(|t| t == "no data"));
}

#[test]
fn markers_are_bounded_and_evenly_thinned() {
    let mut m = Markers::new("lab", Color::Black);
    for i in 0..100_000 {
        m.push(f64::from(i), 1.0);
        assert!(m.kept() <= MAX_MARKERS);
    }
    m.push(f64::NAN, 1.0);
    assert_eq!(m.len(), 100_000);
    assert!(m.kept() > MAX_MARKERS / 2);
    let stride = m.pts[1].0 - m.pts[0].0;
    assert!(m.pts.windows(2).all(|w| w[1].0 - w[0].0 == stride));
}

#[test]
fn legends_wrap_and_many_markers_drop_value_labels() {
    let mut p = Panel::new("flow [m³/h]");
    for i in 0..12 {
        let mut s = Series::new(&format!("a rather long series name {i}"), Color::nth(i));
        s.push(0.0, f64::from(i as u32));
        s.push(1.0, 1.0);
        p.series.push(s);
    }
    let mut m = Markers::new("lab", Color::Black);
    for i in 0..41 {
        m.push(f64::from(i) / 41.0, 123.456);
    }
    p.markers.push(m);
    let (items, rows) = legend_rows(&p, W - 26.0);
    assert_eq!(items.len(), 13);
    assert!(rows.len() >= 3);
    for row in &rows {
        let w: f64 = row.iter().map(|&i| items[i].width()).sum();
        assert!(w <= W || row.len() == 1);
    }
    let svg = Figure {
        panels: vec![p],
        ..Figure::default()
    }
    .to_svg();
    check_xml(&svg).unwrap();
    assert!(!svg.contains(">123.5<"), "41 markers: no value labels");
}

/// 2026-03-02T05:00:00Z, ms (the demo's start; demo.rs: 06:00 at UTC+1).
const T_DEMO: f64 = 1_772_427_600_000.0;
const H_MS: f64 = 3_600_000.0;

fn range(lo: f64, hi: f64) -> Range {
    let mut r = Range::new();
    r.add(lo);
    r.add(hi);
    r
}

#[test]
fn clock_axis_ticks_fall_on_round_local_times() {
    use super::axis::clock_axis;
    use crate::clock::Clock;
    // 12 h from 05:00 UTC, about 9 intervals: every 2 h on the even hours.
    let a = clock_axis(range(T_DEMO, T_DEMO + 12.0 * H_MS), 9, &Clock::utc());
    assert_eq!(
        a.labels,
        ["06:00", "08:00", "10:00", "12:00", "14:00", "16:00"]
    );
    assert!(a.dates.iter().all(|d| d == "2026-03-02"));
    assert_eq!(a.ticks[0], T_DEMO + H_MS);
    assert_eq!((a.lo, a.hi), (T_DEMO, T_DEMO + 12.0 * H_MS));
    // The same instants at UTC+1: local 06:00 .. 18:00.
    let cet = Clock::new("Europe/Vienna", |_| 3600);
    let a = clock_axis(range(T_DEMO, T_DEMO + 12.0 * H_MS), 9, &cet);
    assert_eq!(
        a.labels,
        ["06:00", "08:00", "10:00", "12:00", "14:00", "16:00", "18:00"]
    );
    assert_eq!(a.ticks[0], T_DEMO, "local 06:00 is 05:00 UTC");
    // 39 days: weekly ticks at local midnight on Mondays (2026-03-02 is a
    // Monday: 20514 days after 1970-01-01, a Thursday; 20514 mod 7 = 4).
    let a = clock_axis(range(T_DEMO, T_DEMO + 39.0 * 24.0 * H_MS), 9, &cet);
    assert_eq!(a.labels[0], "09 Mar");
    assert_eq!(a.labels.len(), 5, "{:?}", a.labels);
    assert!(a.dates.iter().all(|d| d == "2026"));
    let midnight = T_DEMO + 7.0 * 24.0 * H_MS - 6.0 * H_MS;
    assert_eq!(a.ticks[0], midnight, "09 Mar 00:00 at UTC+1");
    // A year, about 9 intervals: every second month on the first of odd
    // months (12 / 2 = 6 intervals; monthly would be 12), from May (the
    // first of March 2026 is before the start) to March 2027 (365 days on
    // is 2027-03-02).
    let a = clock_axis(
        range(T_DEMO, T_DEMO + 365.0 * 24.0 * H_MS),
        9,
        &Clock::utc(),
    );
    assert_eq!(a.labels, ["May", "Jul", "Sep", "Nov", "Jan", "Mar"]);
    assert_eq!(a.dates, ["2026", "2026", "2026", "2026", "2027", "2027"]);
}

#[test]
fn clock_axis_across_a_change_of_offset_stays_increasing() {
    use super::axis::clock_axis;
    use crate::clock::Clock;
    // EU summer time 2026 starts 2026-03-29T01:00Z (Directive 2000/84/EC).
    const SWITCH: i64 = 1_774_746_000_000;
    let c = Clock::new("Europe/Vienna", |ms| if ms < SWITCH { 3600 } else { 7200 });
    let lo = SWITCH as f64 - 6.0 * H_MS;
    let a = clock_axis(range(lo, lo + 12.0 * H_MS), 12, &c);
    assert!(a.ticks.windows(2).all(|w| w[1] > w[0]), "{:?}", a.ticks);
    // Local 02:00 does not exist that night: 01:00 then 03:00.
    let i = a.labels.iter().position(|l| l == "01:00").expect("01:00");
    assert_eq!(a.labels[i + 1], "03:00", "{:?}", a.labels);
    assert_eq!(a.ticks[i + 1] - a.ticks[i], H_MS);
}

#[test]
fn sigma_bands_are_drawn_bounded_and_named() {
    let mut s = Series::with_max_buckets("holdup", Color::Blue, 50).with_sigma_band();
    for i in 0..10_000 {
        let x = f64::from(i);
        // No σ for the first 100 samples: the line but no band there.
        let sigma = if i < 100 { f64::NAN } else { 0.5 };
        s.push_with_sigma(x, 10.0, sigma);
    }
    assert!(s.sigma_kept() <= 4 * 50);
    assert!(s.sigma_kept() > 0);
    let svg = Figure {
        panels: vec![Panel {
            series: vec![s],
            ..Panel::new("holdup [m³]")
        }],
        ..Figure::default()
    }
    .to_svg();
    let (_, texts) = check_xml(&svg).unwrap();
    assert!(texts.iter().any(|t| t == "holdup ± 1σ"), "{texts:?}");
    assert_eq!(svg.matches("<polygon").count(), 1);
    // The y axis covers the band (10 ± 0.5).
    assert!(
        texts.iter().any(|t| t == "10.5" || t == "10.6"),
        "{texts:?}"
    );
    // Without σ anywhere: no band, the plain name.
    let mut s = Series::new("level", Color::Blue).with_sigma_band();
    s.push_with_sigma(0.0, 1.0, f64::NAN);
    s.push_with_sigma(1.0, 1.0, -1.0);
    let svg = Figure {
        panels: vec![Panel {
            series: vec![s],
            ..Panel::new("level [m]")
        }],
        ..Figure::default()
    }
    .to_svg();
    assert!(!svg.contains("<polygon"));
    assert!(svg.contains(">level<"));
}

#[test]
fn legends_list_only_what_is_drawn_with_fixed_shade_colours() {
    let mut line = Series::new("flow", Color::Blue);
    line.push(0.0, 1.0);
    line.push(10.0, 2.0);
    let empty_lab = Markers::new("lab result", Color::Black);
    let panel = |bands: Vec<Band>| Panel {
        series: vec![line.clone()],
        markers: vec![empty_lab.clone()],
        bands,
        ..Panel::new("flow [m³/h]")
    };
    // Two figures with the kinds in opposite order: each kind keeps its
    // own fill, and the legend follows the table's order.
    let a = panel(vec![
        Band::new(1.0, 2.0, Shade::DataGap),
        Band::new(3.0, 4.0, Shade::MoreOutThanIn),
    ]);
    let b = panel(vec![
        Band::new(1.0, 2.0, Shade::MoreOutThanIn),
        Band::new(3.0, 4.0, Shade::DataGap),
    ]);
    for p in [a, b] {
        let (items, _) = legend_rows(&p, W - 26.0);
        let texts: Vec<&str> = items.iter().map(|i| i.text).collect();
        assert_eq!(
            texts,
            ["flow", Shade::DataGap.label(), Shade::MoreOutThanIn.label()]
        );
        let svg = Figure {
            panels: vec![p],
            ..Figure::default()
        }
        .to_svg();
        assert!(!svg.contains(">lab result<"), "no points, no entry");
        for s in [Shade::DataGap, Shade::MoreOutThanIn] {
            // One band and one swatch of each kind, in its fill.
            assert_eq!(svg.matches(&format!("fill=\"{}\"", s.fill())).count(), 2);
        }
    }
    // Every kind has its own fill and label.
    let mut fills: Vec<&str> = Shade::ALL.iter().map(|s| s.fill()).collect();
    fills.sort_unstable();
    fills.dedup();
    assert_eq!(fills.len(), Shade::ALL.len());
}

#[test]
fn figure_ids_are_prefixed_for_inlining() {
    let mut line = Series::new("x", Color::Blue);
    line.push(0.0, 1.0);
    line.push(1.0, 2.0);
    let fig = |id: &str| Figure {
        id: id.into(),
        panels: vec![Panel {
            series: vec![line.clone()],
            ..Panel::new("y")
        }],
        ..Figure::default()
    };
    let a = fig("holdup-").to_svg();
    assert!(a.contains("<clipPath id=\"holdup-clip0\">"));
    assert!(a.contains("clip-path=\"url(#holdup-clip0)\""));
    assert!(a.contains("<g id=\"holdup-panel0\">"));
    assert!(fig("").to_svg().contains("<clipPath id=\"clip0\">"));
}
