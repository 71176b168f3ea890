//! `holdup live` refusing what it cannot run, through the command as a user
//! runs it (exit status and message). The run against a PLC is checked by
//! `tests/modbus/live.py` with a pymodbus server.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("..")
}

fn scratch(name: &str) -> PathBuf {
    let d = Path::new(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&d);
    std::fs::create_dir_all(&d).unwrap();
    d
}

fn live(config: &Path, out: &Path, extra: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_holdup"))
        .arg("live")
        .arg("--config")
        .arg(config)
        .arg("--out")
        .arg(out)
        .args(extra)
        .output()
        .unwrap()
}

fn fixture_text() -> String {
    std::fs::read_to_string(root().join("fixtures/plc/plant.toml")).unwrap()
}

fn refused(out: &Output, parts: &[&str]) {
    let stderr = String::from_utf8_lossy(&out.stderr);
    assert_eq!(out.status.code(), Some(2), "{stderr}");
    for p in parts {
        assert!(stderr.contains(p), "{p:?} not in: {stderr}");
    }
}

#[test]
fn a_plant_without_plc_is_refused_naming_the_file_and_section() {
    let dir = scratch("live-no-plc");
    let config = root().join("fixtures/demo/plant.toml");
    let out = live(&config, &dir.join("out"), &["--duration", "1 s"]);
    refused(&out, &["fixtures/demo/plant.toml: [plc]: missing section"]);
}

#[test]
fn an_f64_plant_is_refused() {
    let dir = scratch("live-f64");
    let config = dir.join("plant.toml");
    let text = fixture_text().replace("scalar = \"f32\"", "scalar = \"f64\"");
    std::fs::write(&config, text).unwrap();
    let out = live(&config, &dir.join("out"), &["--duration", "1 s"]);
    refused(
        &out,
        &["plant.toml: [plant] scalar: holdup live needs \"f32\""],
    );
}

#[test]
fn a_bad_duration_is_refused() {
    let dir = scratch("live-duration");
    let config = root().join("fixtures/plc/plant.toml");
    let out = live(&config, &dir.join("out"), &["--duration", "ten"]);
    refused(&out, &["--duration"]);
}

#[test]
fn no_plc_listening_ends_with_no_reading_and_an_empty_recording() {
    let dir = scratch("live-nobody");
    // A port that was free a moment ago: nothing listens there.
    let port = std::net::TcpListener::bind("127.0.0.1:0")
        .unwrap()
        .local_addr()
        .unwrap()
        .port();
    let config = dir.join("plant.toml");
    let text = fixture_text().replace("127.0.0.1:15020", &format!("127.0.0.1:{port}"));
    std::fs::write(&config, text).unwrap();
    let out_dir = dir.join("out");
    let out = live(&config, &out_dir, &["--duration", "2 s"]);
    refused(
        &out,
        &[&format!("127.0.0.1:{port}: no reading from the PLC")],
    );
    let csv = std::fs::read_to_string(out_dir.join("inputs.csv")).unwrap();
    assert_eq!(csv, "time,FI-110,XI-110,FI-120,FI-210,TI-710,LI-710\n");
}

#[test]
fn write_back_without_an_address_is_refused_before_polling() {
    let dir = scratch("live-write-back");
    let config = dir.join("plant.toml");
    let text = fixture_text().replace("write_back = 100\n", "");
    std::fs::write(&config, text).unwrap();
    let out = live(
        &config,
        &dir.join("out"),
        &["--duration", "5 s", "--write-back"],
    );
    refused(
        &out,
        &["[plc] write_back: missing (required by --write-back)"],
    );
    // Refused at once, not after polling a PLC that is not there.
    assert!(!dir.join("out/inputs.csv").exists());
}
