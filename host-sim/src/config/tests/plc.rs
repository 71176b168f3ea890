//! `[plc]` and the `plc` table of `[tags."…"]`, on the live fixture
//! (`fixtures/plc/plant.toml`, the plant the simulated PLC of
//! `tests/modbus/plc.py` serves): expected values from the fixture's text.

use super::*;
use crate::plant::{PlcTable, PlcType};
use holdup_kernel::modbus::WordOrder;

fn fixture() -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures/plc/plant.toml");
    std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

#[test]
fn the_fixture_reads_its_plc_and_every_tag_point() {
    let p = ok(&fixture());
    let plc = p.plc.as_ref().expect("[plc]");
    assert_eq!(plc.address, "127.0.0.1:15020");
    assert_eq!(plc.unit_id, 1);
    assert_eq!(plc.word_order, WordOrder::HighFirst);
    assert_eq!(
        (plc.timeout_ms, plc.reconnect_ms, plc.reconnect_max_ms),
        (300, 500, 2_000)
    );
    assert_eq!(plc.write_back, Some(100));
    let tags: Vec<&str> = plc.points.iter().map(|(t, _)| t.as_str()).collect();
    assert_eq!(
        tags,
        ["FI-110", "XI-110", "FI-120", "FI-210", "TI-710", "LI-710"]
    );
    let point = |tag: &str| plc.points.iter().find(|(t, _)| t == tag).unwrap().1;
    let w = point("FI-120");
    assert_eq!(
        (w.table, w.address, w.kind, w.word_order),
        (PlcTable::Holding, 2, PlcType::F32, WordOrder::LowFirst)
    );
    let t = point("TI-710");
    assert_eq!(
        (t.table, t.address, t.kind, t.scale, t.offset),
        (PlcTable::Input, 0, PlcType::I16, 0.1, 0.0)
    );
    let x = point("XI-110");
    assert_eq!(
        (x.kind, x.scale, x.word_order),
        (PlcType::U32, 1e-6, WordOrder::HighFirst)
    );
}

#[test]
fn defaults_of_plc_and_of_a_point() {
    let text = format!(
        "{MINIMAL}\n[plc]\naddress = \"plc.example:502\"\n\n[tags.\"TI-1\"]\nplc = {{ address = 7, type = \"u16\" }}\n"
    );
    let text = edit(
        &text,
        "value = 20\nunit = \"degC\"",
        "tag = \"TI-1\"\nunit = \"degC\"",
    );
    let p = ok(&text);
    let plc = p.plc.unwrap();
    // Tick 500 ms: the default timeout is half of it.
    assert_eq!(
        (
            plc.unit_id,
            plc.word_order,
            plc.timeout_ms,
            plc.reconnect_ms,
            plc.reconnect_max_ms
        ),
        (1, WordOrder::HighFirst, 250, 1_000, 30_000)
    );
    assert_eq!(plc.write_back, None);
    let (tag, pt) = &plc.points[0];
    assert_eq!(tag, "TI-1");
    assert_eq!(
        (pt.unit_id, pt.table, pt.address, pt.kind, pt.scale, pt.offset),
        (1, PlcTable::Holding, 7, PlcType::U16, 1.0, 0.0)
    );
    assert!(ok(MINIMAL).plc.is_none());
}

#[test]
fn plc_section_errors_name_the_key() {
    let f = fixture();
    let cases: &[(&str, &str, &str, &str, &[&str])] = &[
        (
            "address = \"127.0.0.1:15020\"",
            "address = \"127.0.0.1\"",
            "[plc] address",
            "address = ",
            &["expected \"host:port\"", "got \"127.0.0.1\""],
        ),
        (
            "unit = 1\nword_order",
            "unit = 0\nword_order",
            "[plc] unit",
            "unit = 0",
            &["whole number from 1 to 255, got 0"],
        ),
        (
            "timeout = \"300 ms\"",
            "timeout = \"1 s\"",
            "[plc] timeout",
            "timeout = ",
            &["shorter than the tick (1000 ms), got 1000 ms"],
        ),
        (
            "reconnect_max = \"2 s\"",
            "reconnect_max = \"100 ms\"",
            "[plc] reconnect_max",
            "reconnect_max",
            &["not be shorter than reconnect (500 ms)"],
        ),
        (
            "write_back = 100",
            "write_back = 1.5",
            "[plc] write_back",
            "write_back",
            &["whole number from 0 to 65535, got 1.5"],
        ),
        (
            "write_back = 100",
            "writeback = 100",
            "[plc] writeback",
            "writeback",
            &["unknown key; valid keys: address, unit, word_order"],
        ),
        (
            "word_order = \"high-first\"",
            "word_order = \"big\"",
            "[plc] word_order",
            "word_order = \"big\"",
            &["\"high-first\", \"low-first\""],
        ),
    ];
    for (from, to, key, needle, parts) in cases {
        let text = edit(&f, from, to);
        let e = err(&text);
        check(&e, &text, needle, key, parts);
    }
}

#[test]
fn point_errors_name_the_tag_and_key() {
    let f = fixture();
    let cases: &[(&str, &str, &str, &str, &[&str])] = &[
        (
            "address = 4, type = \"f32\"",
            "address = 4, type = \"f64\"",
            "[tags.\"FI-210\"] plc.type",
            "type = \"f64\"",
            &["\"u16\", \"i16\", \"u32\", \"i32\", \"f32\""],
        ),
        (
            "address = 4, type = \"f32\"",
            "address = 65535, type = \"f32\"",
            "[tags.\"FI-210\"] plc.address",
            "65535",
            &["a 2-register value cannot start at 65535"],
        ),
        (
            "address = 4, type = \"f32\"",
            "address = 70000, type = \"f32\"",
            "[tags.\"FI-210\"] plc.address",
            "70000",
            &["whole number from 0 to 65535, got 70000"],
        ),
        (
            "address = 4, type = \"f32\"",
            "address = 4",
            "[tags.\"FI-210\"] plc.type",
            "address = 4 }",
            &["missing (required); one of \"u16\""],
        ),
        (
            "table = \"input\", address = 1,",
            "table = \"inputs\", address = 1,",
            "[tags.\"LI-710\"] plc.table",
            "\"inputs\"",
            &["\"holding\", \"input\""],
        ),
        (
            "scale = 0.001",
            "scale = 0",
            "[tags.\"LI-710\"] plc.scale",
            "scale = 0 ",
            &["must not be 0"],
        ),
        (
            "type = \"i16\", scale = 0.1",
            "type = \"i16\", gain = 0.1",
            "[tags.\"TI-710\"] plc.gain",
            "gain",
            &["valid keys: unit, table, address, type, word_order, scale, offset"],
        ),
    ];
    for (from, to, key, needle, parts) in cases {
        let text = edit(&f, from, to);
        let e = err(&text);
        check(&e, &text, needle, key, parts);
    }
}

#[test]
fn every_tag_needs_a_point_and_a_point_needs_plc() {
    let f = fixture();
    let text = edit(
        &f,
        "plc = { table = \"holding\", address = 4, type = \"f32\" }\n",
        "",
    );
    let e = err(&text);
    check(
        &e,
        &text,
        "[plc]",
        "[plc]",
        &["tag FI-210 has no [tags.\"FI-210\"] plc table"],
    );
    let start = f.find("[plc]").unwrap();
    let end = f.find("# Holding registers").unwrap();
    let text = format!("{}{}", &f[..start], &f[end..]);
    let e = err(&text);
    check(
        &e,
        &text,
        "plc = { table = \"holding\", address = 0",
        "[tags.\"FI-110\"] plc",
        &["needs a [plc] section"],
    );
}

/// The ```toml block under "## Live beside a PLC" in `docs/config.md`.
fn doc_block() -> String {
    let path = Path::new(env!("CARGO_MANIFEST_DIR")).join("../docs/config.md");
    let doc = std::fs::read_to_string(&path).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let mut lines = doc
        .lines()
        .skip_while(|l| !l.starts_with("## Live beside a PLC"))
        .skip_while(|l| l.trim() != "```toml")
        .skip(1);
    let block: Vec<&str> = lines.by_ref().take_while(|l| l.trim() != "```").collect();
    assert!(
        !block.is_empty(),
        "no ```toml block under \"## Live beside a PLC\""
    );
    block.join("\n") + "\n"
}

#[test]
fn the_docs_example_is_the_fixtures_plc() {
    // The fixture up to its [plc], then the doc's block: the same PLC and
    // the same points as the fixture (the doc's hold keys left out).
    let f = fixture();
    let head = &f[..f.find("[plc]").unwrap()];
    let from_doc = ok(&format!("{head}{}", doc_block()));
    let fixture = ok(&f);
    assert_eq!(from_doc.plc, fixture.plc);
}
