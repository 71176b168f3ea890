//! `holdup registers`: the plant's register map written out from the
//! kernel's one [`RegisterMap`]: `registers.md` (tables for the reader,
//! with the code tables) and `registers.csv` (one row per entry, for a PLC
//! programmer's import).
//!
//! Names carry the plant's stream and species names; units are SI, as the
//! host's channels are configured in SI (a gateway channel configured as
//! a 4–20 mA loop takes mA instead).

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use holdup_kernel::diagnostics::Reasons;
use holdup_kernel::modbus::{Entry, Item, Kind, LabOutcome, LinkFlags, RegisterMap, Table};
use holdup_kernel::StatusFlags;

use crate::link;
use crate::plant::Plant;
use crate::text::CAUTION;

/// The conventional 1-based number of an entry: `4xxxx` holding, `3xxxx`
/// input, `0xxxx` coil.
pub fn number(e: &Entry) -> String {
    let n = u32::from(e.address) + 1;
    match e.table {
        Table::Holding => format!("{}", 40_000 + n),
        Table::Input => format!("{}", 30_000 + n),
        Table::Coil => format!("{n:05}"),
    }
}

fn table_word(t: Table) -> &'static str {
    match t {
        Table::Holding => "holding",
        Table::Input => "input",
        Table::Coil => "coil",
    }
}

fn kind_word(k: Kind) -> &'static str {
    match k {
        Kind::U16 => "u16",
        Kind::U32 => "u32",
        Kind::F32 => "f32",
        Kind::Bit => "bit",
    }
}

/// A stable key of an entry for programs reading the CSV: the item's
/// name in snake case with its stream, species and bias indices
/// (`feed[0][1]` is species 1 in inlet 0).
pub fn key(item: Item) -> String {
    match item {
        Item::InletFlow(k) => format!("inlet_flow[{k}]"),
        Item::Feed(k, i) => format!("feed[{k}][{i}]"),
        Item::OutletFlow(k) => format!("outlet_flow[{k}]"),
        Item::ConcentrationQuality(i) => format!("concentration_quality[{i}]"),
        Item::Concentration(i) => format!("concentration[{i}]"),
        Item::ConcentrationSigma(i) => format!("concentration_sigma[{i}]"),
        Item::Bias(b) => format!("bias[{b}]"),
        Item::BiasSigma(b) => format!("bias_sigma[{b}]"),
        other => {
            // The unit variants: their Debug name, in snake case.
            let mut out = String::new();
            for (k, c) in format!("{other:?}").chars().enumerate() {
                if c.is_ascii_uppercase() && k > 0 {
                    out.push('_');
                }
                out.push(c.to_ascii_lowercase());
            }
            out
        }
    }
}

/// Who writes an entry.
fn access(t: Table) -> &'static str {
    match t {
        Table::Holding => "PLC writes (03 read, 06/16 write)",
        Table::Input => "PLC reads (04)",
        Table::Coil => "PLC writes (01 read, 05/15 write)",
    }
}

/// The plant's names, to name entries by.
struct Names<'a>(&'a Plant);

impl Names<'_> {
    fn species(&self, i: u8) -> &str {
        self.0
            .species
            .get(usize::from(i))
            .map_or("?", |s| s.name.as_str())
    }
    fn inlet(&self, k: u8) -> &str {
        self.0
            .inlets
            .get(usize::from(k))
            .map_or("?", |s| s.name.as_str())
    }
    fn outlet(&self, k: u8) -> &str {
        self.0
            .outlets
            .get(usize::from(k))
            .map_or("?", |s| s.name.as_str())
    }
    fn bias(&self, b: u8) -> &str {
        self.0
            .estimator
            .as_ref()
            .and_then(|e| e.bias_meters.get(usize::from(b)))
            .map_or("?", |m| m.name.as_str())
    }
}

/// Name, unit and meaning of an entry, for the plant.
fn describe(item: Item, n: &Names<'_>) -> (String, &'static str, String) {
    let s = |x: &str| x.to_string();
    match item {
        Item::InputSequence => (s("input sequence"), "", s("raise (by any amount, wrapping) after writing a tick's inputs; feeds the watchdog; in sequence mode each change runs one tick")),
        Item::LabDrawSequence => (s("lab draw sequence"), "", s("raise when a sample is drawn (lab species, sample id, lab σ written first); applied at the next tick")),
        Item::LabResultSequence => (s("lab result sequence"), "", s("raise when a result is ready (sample id, lab value written first); applied at the next tick")),
        Item::LabSpecies => (s("lab species"), "", s("species of the lab sample or reset, 0-based (see the species list)")),
        Item::LabSampleId => (s("lab sample id"), "", s("unique among pending samples, for example the draw time in s")),
        Item::LabValue => (s("lab value"), "mol/m³", s("the lab result, or the value to reset to")),
        Item::LabSigma => (s("lab sigma"), "mol/m³", s("1σ of the lab analysis")),
        Item::InletFlow(k) => (format!("flow of inlet '{}'", n.inlet(k)), "m³/s", s("measured flow; NaN until written")),
        Item::Feed(k, i) => (format!("feed {} in inlet '{}'", n.species(i), n.inlet(k)), "mol/m³", s("feed concentration; constants of the plant are written at start")),
        Item::OutletFlow(k) => (format!("flow of outlet '{}'", n.outlet(k)), "m³/s", s("measured flow (unused for an outlet that is not measured)")),
        Item::Temperature => (s("temperature"), "K", s("vessel temperature; a constant of the plant is written at start")),
        Item::Level => (s("level"), "m", s("measured level")),
        Item::MapVersion => (s("map version"), "", format!("layout version of this map ({})", holdup_kernel::modbus::MAP_VERSION)),
        Item::WordOrderCode => (s("word order"), "", s("0 high word first, 1 low word first")),
        Item::TickCount => (s("tick count"), "", s("ticks run since start")),
        Item::Heartbeat => (s("heartbeat"), "", s("raised by one every tick (wrapping)")),
        Item::SequenceApplied => (s("sequence applied"), "", s("the input sequence the last tick ran on")),
        Item::DeviceStatus => (s("NE107 status"), "", s("see the status codes")),
        Item::HoldupQuality => (s("holdup quality"), "", s("quality of holdup and level; see the quality codes")),
        Item::KernelFlags => (s("kernel flags"), "", s("the kernel's status flags of the last tick; see the kernel flags")),
        Item::LinkFlags => (s("link flags"), "", s("see the link flags")),
        Item::LabOutcome => (s("lab outcome"), "", s("outcome of the last lab event; see the lab outcomes")),
        Item::Reasons => (s("NE107 reasons"), "", s("the NE107 rules that fired; see the reasons")),
        Item::ConcentrationQuality(i) => (format!("quality of {}", n.species(i)), "", s("see the quality codes")),
        Item::Holdup => (s("holdup"), "m³", s("estimated volume held")),
        Item::HoldupSigma => (s("holdup sigma"), "m³", s("1σ of the holdup (0 for an open loop)")),
        Item::LevelEstimate => (s("level estimate"), "m", s("level of the estimated holdup")),
        Item::Concentration(i) => (format!("concentration of {}", n.species(i)), "mol/m³", s("estimated concentration")),
        Item::ConcentrationSigma(i) => (format!("sigma of {}", n.species(i)), "mol/m³", s("1σ of the concentration (0 for an open loop)")),
        Item::Bias(b) => (format!("bias of '{}'", n.bias(b)), "1", s("estimated relative meter bias (0.02 reads 2 % high)")),
        Item::BiasSigma(b) => (format!("bias sigma of '{}'", n.bias(b)), "1", s("1σ of the bias")),
        Item::ResetFromLab => (s("reset from lab"), "", s("reset lab species to lab value with 1σ lab sigma at the next tick; clears itself")),
        Item::SaveCheckpoint => (s("save checkpoint"), "", s("save a checkpoint at the next tick; exception 04 where the server keeps none")),
        Item::AcknowledgeAlarm => (s("acknowledge alarm"), "", s("acknowledge the balance-closure alarm (its test restarts); clears itself")),
        Item::FunctionCheck => (s("function check"), "", s("NE107 C while on (maintenance, calibration, simulation); stays as written")),
    }
}

/// What a link flag means.
pub fn link_flag_meaning(flag: LinkFlags) -> Option<&'static str> {
    let table = [
        (LinkFlags::STALE, "watchdog: the input sequence has not changed for the configured time; estimates go on from the last inputs with growing σ; status F"),
        (LinkFlags::CLOSURE_ALARM, "the balance-closure alarm is on"),
        (LinkFlags::NIS_ALARM, "the innovations do not fit the filter's noise (model or tuning)"),
        (LinkFlags::RESEEDED, "the holdup was re-seeded from the level this tick"),
        (LinkFlags::RESET_APPLIED, "a reset from a lab result was applied this tick"),
        (LinkFlags::RESET_REFUSED, "a reset from a lab result was refused this tick"),
        (LinkFlags::CHECKPOINT_SAVED, "the last checkpoint was saved"),
        (LinkFlags::CHECKPOINT_FAILED, "the last checkpoint could not be saved"),
        (LinkFlags::FUNCTION_CHECK, "the function-check coil is on"),
    ];
    table.iter().find(|(f, _)| *f == flag).map(|(_, m)| *m)
}

/// What a lab outcome means.
pub fn lab_outcome_meaning(o: LabOutcome) -> &'static str {
    match o {
        LabOutcome::None => "no lab event yet",
        LabOutcome::Drawn => "the sample was recorded as drawn",
        LabOutcome::QueueFull => "draw refused: every pending slot is in use",
        LabOutcome::NotObservable => {
            "draw refused: unknown species, σ not positive, or vessel near empty"
        }
        LabOutcome::Accepted => "the result was fused",
        LabOutcome::Rejected => "the result was rejected by the innovation gate",
        LabOutcome::Skipped => "the result was not a number, or the vessel was near empty",
        LabOutcome::NotPending => "the result names no pending sample",
        LabOutcome::NotObserved => "the sensor has no observer: lab results cannot be fused",
    }
}

/// The NE107 status codes: code, letter, name.
pub const STATUS_CODES: [(u16, char, &str); 5] = [
    (0, '-', "good"),
    (1, 'M', "maintenance required"),
    (2, 'S', "out of specification"),
    (3, 'C', "function check"),
    (4, 'F', "failure"),
];

/// The quality codes: code, word.
pub const QUALITY_CODES: [(u16, &str); 3] = [(0, "good"), (1, "uncertain"), (2, "bad")];

/// Every named bit of a flag set: bit, name.
fn bits(width: u32, name: impl Fn(u32) -> Option<&'static str>) -> Vec<(u32, &'static str)> {
    (0..width).filter_map(|b| name(b).map(|n| (b, n))).collect()
}

/// The kernel flags of input register 8: bit, name.
pub fn kernel_flag_bits() -> Vec<(u32, &'static str)> {
    bits(16, |b| StatusFlags::from_bits(1 << b).names().next())
}

/// The NE107 reasons of input registers 11–12: bit, name.
pub fn reason_bits() -> Vec<(u32, &'static str)> {
    bits(32, |b| Reasons::from_bits(1 << b).names().next())
}

/// One row per entry: the CSV.
pub fn csv(plant: &Plant, map: &RegisterMap) -> String {
    let mut out =
        String::from("table,address,number,key,name,type,registers,unit,access,meaning\n");
    let names = Names(plant);
    let q = |s: &str| format!("\"{}\"", s.replace('"', "\"\""));
    for e in map.entries() {
        let (name, unit, meaning) = describe(e.item, &names);
        let _ = writeln!(
            out,
            "{},{},{},{},{},{},{},{},{},{}",
            table_word(e.table),
            e.address,
            number(&e),
            key(e.item),
            q(&name),
            kind_word(e.kind),
            e.kind.width(),
            q(unit),
            q(access(e.table)),
            q(&meaning)
        );
    }
    out
}

/// The Markdown document.
pub fn markdown(plant: &Plant, map: &RegisterMap) -> String {
    let mut md = format!("# Register map: {}\n\n", plant.name);
    md.push_str(&format!(
        "Generated by `holdup registers` from the plant's configuration; do not edit. \
Map version {}. Addresses are the protocol's (0-based); numbers are the \
conventional 1-based ones (`4xxxx` holding, `3xxxx` input, `0xxxx` coil). \
Units are SI.\n\n{CAUTION}\n\n",
        holdup_kernel::modbus::MAP_VERSION
    ));
    md.push_str(
        "**Word order.** A `u32` or `f32` takes two registers. With `--word-order high-first` \
(the default) the high 16 bits are at the lower address (1.0 = `0x3F80 0x0000`); with \
`low-first` the low 16 bits are (1.0 = `0x0000 0x3F80`). Input register 1 says which.\n\n\
**Security.** Modbus has no authentication: keep the link on a separate network behind a \
firewall; writes are taken only from the addresses allowed, and readers belong on the \
read-only port.\n\n",
    );
    let names = Names(plant);
    let tables = [
        (Table::Holding, "Holding registers (the PLC writes)"),
        (Table::Input, "Input registers (the PLC reads)"),
        (Table::Coil, "Coils (commands)"),
    ];
    for (t, title) in tables {
        md.push_str(&format!(
            "## {title}\n\n| address | number | name | type | unit | meaning |\n|---|---|---|---|---|---|\n"
        ));
        for e in map.entries().filter(|e| e.table == t) {
            let (name, unit, meaning) = describe(e.item, &names);
            let addr = if e.kind.width() == 2 {
                format!("{}–{}", e.address, e.address + 1)
            } else {
                e.address.to_string()
            };
            md.push_str(&format!(
                "| {addr} | {} | {name} | {} | {unit} | {meaning} |\n",
                number(&e),
                kind_word(e.kind)
            ));
        }
        md.push('\n');
    }
    md.push_str(&code_tables(plant));
    md
}

/// The code tables of the Markdown document.
fn code_tables(plant: &Plant) -> String {
    let mut md = String::from(
        "## Status codes (input register 6)\n\n| code | NE107 | meaning |\n|---|---|---|\n",
    );
    for (c, l, n) in STATUS_CODES {
        md.push_str(&format!("| {c} | {l} | {n} |\n"));
    }
    md.push_str("\n## Quality codes\n\n| code | quality |\n|---|---|\n");
    for (c, n) in QUALITY_CODES {
        md.push_str(&format!("| {c} | {n} |\n"));
    }
    md.push_str("\n## Link flags (input register 9)\n\n| bit | value | name | meaning |\n|---|---|---|---|\n");
    for (f, name) in LinkFlags::ALL {
        let bit = f.bits().trailing_zeros();
        let meaning = link_flag_meaning(*f).unwrap_or("");
        md.push_str(&format!("| {bit} | {} | {name} | {meaning} |\n", f.bits()));
    }
    md.push_str(
        "\n## Lab outcomes (input register 10)\n\n| code | outcome | meaning |\n|---|---|---|\n",
    );
    for o in LabOutcome::ALL {
        md.push_str(&format!(
            "| {} | {o:?} | {} |\n",
            o.code(),
            lab_outcome_meaning(o)
        ));
    }
    md.push_str("\n## Kernel flags (input register 8)\n\n| bit | name |\n|---|---|\n");
    for (b, n) in kernel_flag_bits() {
        md.push_str(&format!("| {b} | {n} |\n"));
    }
    md.push_str("\n## NE107 reasons (input registers 11–12, `u32`)\n\n| bit | name |\n|---|---|\n");
    for (b, n) in reason_bits() {
        md.push_str(&format!("| {b} | {n} |\n"));
    }
    md.push_str("\n## Species (for the lab species register)\n\n| code | species |\n|---|---|\n");
    for (k, s) in plant.species.iter().enumerate() {
        md.push_str(&format!("| {k} | {} |\n", s.name));
    }
    md
}

/// Write `registers.md` and `registers.csv` for `plant` into `dir`.
///
/// Errors: a map too large for the plant, or a file that cannot be written,
/// with its path.
pub fn write(plant: &Plant, dir: &Path) -> Result<Vec<PathBuf>, String> {
    let map = link::map(plant).map_err(|e| format!("{}: {}", plant.path.display(), e.message()))?;
    std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    let files = [
        (dir.join("registers.md"), markdown(plant, &map)),
        (dir.join("registers.csv"), csv(plant, &map)),
    ];
    let mut out = Vec::new();
    for (path, text) in files {
        std::fs::write(&path, text).map_err(|e| format!("{}: {e}", path.display()))?;
        out.push(path);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_link_flag_has_a_meaning() {
        for (f, name) in LinkFlags::ALL {
            assert!(link_flag_meaning(*f).is_some(), "{name}");
        }
    }

    #[test]
    fn numbers_follow_the_convention() {
        // Modicon convention: holding 40001 is address 0, input 30001, coil 00001.
        let e = |table, address| Entry {
            table,
            address,
            item: Item::Holdup,
            kind: Kind::U16,
        };
        assert_eq!(number(&e(Table::Holding, 0)), "40001");
        assert_eq!(number(&e(Table::Input, 27)), "30028");
        assert_eq!(number(&e(Table::Coil, 3)), "00004");
    }

    #[test]
    fn keys_are_snake_case_with_indices() {
        assert_eq!(key(Item::InputSequence), "input_sequence");
        assert_eq!(key(Item::LevelEstimate), "level_estimate");
        assert_eq!(key(Item::Feed(1, 2)), "feed[1][2]");
        assert_eq!(key(Item::BiasSigma(0)), "bias_sigma[0]");
    }
}
