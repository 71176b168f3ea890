//! Shared helpers for the holdup fuzz targets.

use holdup_kernel::checkpoint::{Checkpoint, Checkpoints, FORMAT_VERSION, HEADER_LEN, MAGIC};
use holdup_kernel::crc::crc32;
use holdup_kernel::{reference, BiasTarget, Observer, ObserverSpec};
use holdup_sim::log::LogReader;
use holdup_sim::plant::{Interpolation, LogFormat, LogOptions, TagOptions, TimeFormat};

/// Observer over the reference vessel: N=3, R=2, O=1, D=5 (1 + N + 1 bias), L=2.
pub type RefObserver = Observer<f32, 3, 2, 1, 5, 2>;

/// Slot size and storage size for the checkpoint target.
pub const SLOT: u32 = 512;
pub const LAYOUT: Checkpoints = Checkpoints::new(0, SLOT);
pub const MEM: usize = 2 * SLOT as usize;

/// A valid observer spec for the reference vessel.
pub fn observer_spec() -> ObserverSpec<f32, 3> {
    ObserverSpec {
        level_sigma: 0.003,
        volume_noise: 1e-8,
        amount_noise: [1e-4; 3],
        bias_noise: 1e-12,
        initial_volume_sigma: 0.01,
        initial_amount_sigma: [2.0; 3],
        initial_bias_sigma: 0.05,
        gate: 9.0,
        lab_max_age_ms: 3_600_000,
        biases: heapless::Vec::from_slice(&[BiasTarget::Inlet(0)]).unwrap(),
    }
}

pub fn ref_vessel() -> reference::ReferenceVessel<f32> {
    reference::vessel::<f32>().expect("reference vessel")
}

pub fn ref_observer() -> RefObserver {
    Observer::new(ref_vessel(), observer_spec()).expect("reference observer")
}

/// Make both slots of `mem` pass the header checks for `obj` (magic,
/// version, kind, fingerprint, length clamped to the slot, both CRCs), so
/// that fuzzing reaches the postcard decoding and state validation.
pub fn fix_up<T: Checkpoint>(obj: &T, mem: &mut [u8]) {
    let fp = obj.fingerprint().unwrap_or(0);
    let slot = SLOT as usize;
    for k in 0..2 {
        let s = &mut mem[k * slot..(k + 1) * slot];
        s[0..4].copy_from_slice(&MAGIC);
        s[4..6].copy_from_slice(&FORMAT_VERSION.to_le_bytes());
        s[6..8].copy_from_slice(&T::KIND.to_le_bytes());
        s[12..16].copy_from_slice(&fp.to_le_bytes());
        let max = (slot - HEADER_LEN) as u32;
        let len = u32::from_le_bytes(s[16..20].try_into().unwrap()) % (max + 1);
        s[16..20].copy_from_slice(&len.to_le_bytes());
        let pcrc = crc32(&s[HEADER_LEN..HEADER_LEN + len as usize]);
        s[20..24].copy_from_slice(&pcrc.to_le_bytes());
        let hcrc = crc32(&s[0..24]);
        s[24..28].copy_from_slice(&hcrc.to_le_bytes());
    }
}

pub const TAGS: [&str; 5] = ["FI-101", "FI-201", "TI-301", "LI-301", "PUMP-1"];

pub fn tag_options() -> Vec<TagOptions> {
    TAGS.iter()
        .enumerate()
        .map(|(i, t)| TagOptions {
            tag: t.to_string(),
            interpolation: if i == 4 {
                Interpolation::Hold
            } else {
                Interpolation::Linear
            },
            max_age_ms: 120_000,
            flow: i < 2,
            conditioning: Default::default(),
        })
        .collect()
}

/// Feed `data` to a log reader of the given layout and sample it forward.
pub fn run_log(data: &[u8], format: LogFormat) {
    // The time option from the input's length, so that every seed is read
    // unchanged under each of the three (detection, forced ISO 8601, forced
    // epoch seconds) as the fuzzer grows and shrinks it.
    let time = match data.len() % 3 {
        0 => TimeFormat::Auto,
        1 => TimeFormat::Iso8601,
        _ => TimeFormat::Epoch,
    };
    let opts = LogOptions {
        format,
        time,
        time_column: None,
        max_age_ms: 120_000,
        empty_cells: holdup_sim::plant::EmptyCells::Skip,
        ..LogOptions::default()
    };
    let tags = tag_options();
    let reader: Box<dyn std::io::Read> = Box::new(std::io::Cursor::new(data.to_vec()));
    let Ok(mut log) = LogReader::from_reader(reader, "fuzz.csv", &opts, &tags, 600_000) else {
        return;
    };
    let Ok(Some(mut t)) = log.first_time() else {
        return;
    };
    for _ in 0..4000 {
        match log.sample(t) {
            Ok(Some(samples)) => {
                assert_eq!(samples.len(), tags.len());
            }
            Ok(None) | Err(_) => break,
        }
        t = t.saturating_add(7_000);
    }
    let _ = log.stats();
}

/// The reference sensor behind the register map (unit 1, Modbus link in
/// sequence-clocked mode, checkpoints allowed).
pub fn ref_link() -> holdup_kernel::modbus::Link<f32, 3, 2, 1, 2, 5, 2> {
    use holdup_kernel::modbus::{Clock, Link, LinkSpec, WordOrder};
    let sensor =
        holdup_kernel::Sensor::observed(ref_observer(), holdup_kernel::SensorSpec::plain())
            .expect("the reference sensor");
    let spec = LinkSpec {
        unit_id: 1,
        word_order: WordOrder::HighFirst,
        clock: Clock::Sequence,
        stale_after_ms: 10_000,
        checkpoints: true,
    };
    Link::new(sensor, spec).expect("the reference link")
}

/// CRC-16/MODBUS from the `crc` crate's catalogue.
pub const MODBUS_CRC: crc::Crc<u16> = crc::Crc::<u16>::new(&crc::CRC_16_MODBUS);

/// Split fuzz bytes into frames at each `0xFE 0xED` pair (at most 16).
pub fn frames(data: &[u8]) -> impl Iterator<Item = &[u8]> {
    let mut rest = data;
    let mut n = 0;
    std::iter::from_fn(move || {
        if rest.is_empty() || n == 16 {
            return None;
        }
        n += 1;
        match rest.windows(2).position(|w| w == [0xFE, 0xED]) {
            Some(i) => {
                let (f, r) = rest.split_at(i);
                rest = &r[2..];
                Some(f)
            }
            None => Some(std::mem::take(&mut rest)),
        }
    })
}
