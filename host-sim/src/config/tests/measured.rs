//! `[[analyser]]` and `[level]`.

use super::*;

/// `EXAMPLE` with `[[analyser]]` entries appended.
fn with_analyser(entries: &str) -> String {
    format!("{EXAMPLE}\n{entries}")
}

#[test]
fn analyser_reads_into_si_with_its_cycle() {
    let text = with_analyser(
        r#"[[analyser]]
species = "NaOH"
reading = { tag = "AI-201", unit = "mol/L" }
sigma = { value = 0.004, unit = "mol/L" }
cycle = "5 min"

[[analyser]]
species = "EtOAc"
reading = { tag = "AI-202", unit = "g/L" }
sigma = { value = 0.1, unit = "g/L" }
"#,
    );
    let p = ok(&text);
    assert_eq!(p.analysers.len(), 2);
    let a = &p.analysers[0];
    assert_eq!(a.species, 0);
    // mol/L → mol/m³: ×1000 (SI prefixes).
    assert_eq!(a.reading.tag(), Some("AI-201"));
    assert!(close(a.reading.to_si(0.1), 100.0));
    assert!(close(a.sigma, 4.0));
    assert_eq!(a.cycle_ms, 300_000);
    // g/L of ethyl acetate (88.106 g/mol): 1 g/L = 1000/88.106 mol/m³.
    let b = &p.analysers[1];
    assert_eq!(b.species, 1);
    assert!(close(b.reading.to_si(88.106), 1000.0));
    assert!(close(b.sigma, 100.0 / 88.106));
    // No cycle: the tick.
    assert_eq!(b.cycle_ms, 1000);
    // The analyser's tag is a log tag like any other.
    assert!(p.tags.iter().any(|t| t.tag == "AI-202"));
}

#[test]
fn analyser_errors_name_line_and_key() {
    let good = r#"[[analyser]]
species = "NaOH"
reading = { tag = "AI-201", unit = "mol/L" }
sigma = { value = 0.004, unit = "mol/L" }
"#;
    let cases: [(&str, &str, &str, &str, &[&str]); 6] = [
        (
            "species = \"NaOH\"",
            "species = \"Soda\"",
            "species",
            "species = \"Soda\"",
            &["unknown species \"Soda\"", "NaOH", "EtOAc"],
        ),
        (
            "reading = { tag = \"AI-201\", unit = \"mol/L\" }",
            "reading = { value = 0.1, unit = \"mol/L\" }",
            "reading.value",
            "reading = { value",
            &["read from the log, give its tag"],
        ),
        (
            "reading = { tag = \"AI-201\", unit = \"mol/L\" }",
            "reading = { tag = \"AI-201\", unit = \"m3/h\" }",
            "reading.unit",
            "\"AI-201\", unit = \"m3/h\"",
            &["unknown concentration unit", "mol/L"],
        ),
        (
            "sigma = { value = 0.004, unit = \"mol/L\" }",
            "sigma = { value = 0, unit = \"mol/L\" }",
            "sigma",
            "sigma = { value = 0",
            &["must be positive"],
        ),
        (
            "sigma = { value = 0.004, unit = \"mol/L\" }",
            "sigma = { value = 0.004, unit = \"mol/L\" }\ncycle = \"100 ms\"",
            "cycle",
            "cycle = ",
            &["at least the tick"],
        ),
        (
            "sigma = { value = 0.004, unit = \"mol/L\" }",
            "sigma = { value = 0.004, unit = \"mol/L\" }\ndelay = \"1 min\"",
            "delay",
            "delay = ",
            &["unknown key", "cycle"],
        ),
    ];
    for (from, to, key, needle, parts) in cases {
        let text = with_analyser(&edit(good, from, to));
        let e = err(&text);
        check(&e, &text, needle, &format!("[[analyser]] {key}"), parts);
    }
    // Missing reading.
    let text = with_analyser(&edit(
        good,
        "reading = { tag = \"AI-201\", unit = \"mol/L\" }\n",
        "",
    ));
    let e = err(&text);
    assert_eq!(e.key, "[[analyser]] reading", "{e}");
    assert!(e.message.contains("tag"), "{e}");
    // Two analysers for one species.
    let text = with_analyser(&format!("{good}\n{}", edit(good, "AI-201", "AI-209")));
    let e = err(&text);
    assert_eq!(e.key, "[[analyser]] species", "{e}");
    assert!(e.message.contains("second analyser"), "{e}");
}

#[test]
fn level_must_come_from_the_log() {
    let text = format!("{MINIMAL}\n[level]\nvalue = 1.25\nunit = \"m\"\n");
    let e = err(&text);
    check(
        &e,
        &text,
        "value = 1.25",
        "[level] value",
        &["valid keys: tag, unit", "give its tag"],
    );
    let text = format!("{MINIMAL}\n[level]\ntag = \"LI-1\"\nvalue = 1\nunit = \"m\"\n");
    assert_eq!(err(&text).line, Some(text.lines().count() - 1));
}
