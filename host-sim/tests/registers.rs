//! `docs/registers.md` and `docs/registers.csv` are generated from the
//! kernel's register map for the demo plant: regenerate them and compare
//! with the committed files, so the docs never drift from the map.

use std::path::Path;

const FIX: &str = "run: holdup registers --config fixtures/demo/plant.toml --out docs";

#[test]
fn the_committed_register_docs_are_those_of_the_map() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let plant = holdup_sim::config::load(&root.join("fixtures/demo/plant.toml"))
        .expect("the demo plant loads");
    let out = std::env::temp_dir().join(format!("holdup-registers-{}", std::process::id()));
    holdup_sim::registers::write(&plant, &out).expect("the docs are written");
    for name in ["registers.md", "registers.csv"] {
        let fresh = std::fs::read_to_string(out.join(name)).unwrap();
        let committed = std::fs::read_to_string(root.join("docs").join(name))
            .unwrap_or_else(|e| panic!("docs/{name}: {e}; {FIX}"));
        if fresh != committed {
            let line = fresh
                .lines()
                .zip(committed.lines())
                .position(|(a, b)| a != b)
                .map_or_else(|| "its length".to_string(), |k| format!("line {}", k + 1));
            panic!("docs/{name} is stale (differs at {line}); {FIX}");
        }
    }
    let _ = std::fs::remove_dir_all(&out);
}

#[test]
fn the_csv_has_one_row_per_entry_of_the_map() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let plant = holdup_sim::config::load(&root.join("fixtures/demo/plant.toml")).unwrap();
    let map = holdup_sim::link::map(&plant).unwrap();
    let csv = holdup_sim::registers::csv(&plant, &map);
    // Read back with the csv crate (RFC 4180 quoting), as an importer would.
    let mut reader = csv::Reader::from_reader(csv.as_bytes());
    let rows: Vec<csv::StringRecord> = reader.records().map(Result::unwrap).collect();
    assert_eq!(rows.len(), map.entries().count());
    for (row, e) in rows.iter().zip(map.entries()) {
        assert_eq!(row[1].parse::<u16>().unwrap(), e.address);
        assert_eq!(
            row[5].parse::<u16>().ok(),
            None,
            "type is a word: {:?}",
            &row[5]
        );
        assert_eq!(row[6].parse::<u16>().unwrap(), e.kind.width());
    }
    let names: Vec<&str> = rows.iter().map(|r| &r[4]).collect();
    assert!(
        names.contains(&"feed NaOH in inlet 'caustic pump P-11'"),
        "{names:?}"
    );
    assert!(names.contains(&"bias of 'caustic pump P-11'"), "{names:?}");
}
