use super::*;
use crate::geometry::{Bottom, Geometry, Shape};
use crate::model::{Kinetics, Method, Model, Outlet, ReactionSpec, VesselSpec};
use crate::observer::BiasTarget;
use crate::reference;
use crate::storage::{ErrorKind, MemStorage};
use heapless::Vec as HVec;

const SLOT: u32 = 2048;
const LAYOUT: Checkpoints = Checkpoints::new(64, SLOT);
const MEM: usize = 64 + 2 * SLOT as usize + 16;

type RefObserver<S> = Observer<S, 3, 2, 1, 5, 2>;

/// A storage that loses power during a write: only the first `budget`
/// bytes of the next write reach the device, then it fails.
struct Torn<'a> {
    inner: MemStorage<'a>,
    budget: Option<usize>,
}

impl Storage for Torn<'_> {
    type Error = ErrorKind;

    fn capacity(&self) -> u32 {
        self.inner.capacity()
    }

    fn read(&mut self, addr: u32, buf: &mut [u8]) -> Result<(), ErrorKind> {
        self.inner.read(addr, buf)
    }

    fn write(&mut self, addr: u32, data: &[u8]) -> Result<(), ErrorKind> {
        match self.budget {
            Some(k) if k < data.len() => {
                self.inner.write(addr, &data[..k])?;
                self.budget = Some(0);
                Err(ErrorKind::Bus)
            }
            _ => self.inner.write(addr, data),
        }
    }
}

/// Every write fails.
struct Broken;

impl Storage for Broken {
    type Error = ErrorKind;
    fn capacity(&self) -> u32 {
        1 << 16
    }
    fn read(&mut self, _: u32, _: &mut [u8]) -> Result<(), ErrorKind> {
        Err(ErrorKind::Bus)
    }
    fn write(&mut self, _: u32, _: &[u8]) -> Result<(), ErrorKind> {
        Err(ErrorKind::Bus)
    }
}

fn observer_spec<S: Scalar>(gate: f64) -> ObserverSpec<S, 3> {
    ObserverSpec {
        level_sigma: S::of(0.003),
        volume_noise: S::of(1e-8),
        amount_noise: [S::of(1e-4); 3],
        bias_noise: S::of(1e-12),
        initial_volume_sigma: S::of(0.01),
        initial_amount_sigma: [S::of(2.0); 3],
        initial_bias_sigma: S::of(0.05),
        gate: S::of(gate),
        lab_max_age_ms: 3_600_000,
        biases: HVec::from_slice(&[BiasTarget::Inlet(0)]).unwrap(),
    }
}

fn observer<S: Scalar>() -> RefObserver<S> {
    Observer::new(reference::vessel::<S>().unwrap(), observer_spec(9.0)).unwrap()
}

/// One step of a deterministic scenario: the reference inputs with the
/// caustic meter reading 3 % high, a level reading every tick with a
/// small deterministic ripple, a lab sample of species 0 drawn every 600
/// ticks and its result 120 ticks later.
fn drive<S: Scalar>(obs: &mut RefObserver<S>, tick: u64) {
    let t = obs.vessel().time_ms();
    let mut u = reference::inputs_at::<S>(t);
    u.inlet_flows[0] *= S::of(1.03);
    obs.tick(&u);
    let ripple = S::of(0.002 * ((tick % 17) as f64 - 8.0) / 8.0);
    obs.update_level(obs.vessel().level() + ripple);
    if tick % 600 == 10 {
        obs.lab_drawn(tick as u32, 0, S::of(0.2)).unwrap();
    }
    if tick % 600 == 130 {
        let id = (tick - 120) as u32;
        let c = obs.vessel().concentrations()[0] * S::of(0.99);
        obs.lab_result(id, c).unwrap();
    }
}

fn bits_equal<S: Scalar>(a: &RefObserver<S>, b: &RefObserver<S>) -> bool {
    let same = |x: S, y: S| x.to_f64().to_bits() == y.to_f64().to_bits();
    let va = a.vessel();
    let vb = b.vessel();
    va.time_ms() == vb.time_ms()
        && same(va.volume(), vb.volume())
        && va
            .amounts()
            .iter()
            .zip(vb.amounts())
            .all(|(&x, y)| same(x, y))
        && va
            .concentrations()
            .iter()
            .zip(vb.concentrations())
            .all(|(&x, y)| same(x, y))
        && a.covariance()
            .iter()
            .flatten()
            .zip(b.covariance().iter().flatten())
            .all(|(&x, &y)| same(x, y))
        && a.biases()
            .0
            .iter()
            .zip(b.biases().0)
            .all(|(&x, y)| same(x, y))
        && a.counters() == b.counters()
        && a.pending_lab_samples() == b.pending_lab_samples()
        && a.state() == b.state()
}

/// Write a record with correct CRCs around an arbitrary payload.
fn write_record(mem: &mut MemStorage<'_>, slot: u8, h: Header, payload: &[u8]) {
    let h = Header {
        len: payload.len() as u32,
        payload_crc: crc32(payload),
        ..h
    };
    let addr = LAYOUT.slot_addr(slot, mem.capacity()).unwrap();
    mem.write(addr, &h.encode()).unwrap();
    mem.write(addr + HEADER_LEN as u32, payload).unwrap();
}

fn read_header(mem: &mut MemStorage<'_>, slot: u8) -> Header {
    let addr = LAYOUT.slot_addr(slot, mem.capacity()).unwrap();
    let mut raw = [0u8; HEADER_LEN];
    mem.read(addr, &mut raw).unwrap();
    Header::parse(&raw).unwrap()
}

#[test]
fn vessel_round_trip_alternates_slots() {
    let mut mem = [0xFFu8; MEM];
    let mut st = MemStorage::new(&mut mem);
    let mut scratch = [0u8; 512];
    let mut v = reference::vessel::<f32>().unwrap();
    // First boot: both slots blank.
    assert_eq!(
        LAYOUT.restore(&v, &mut st, &mut scratch).err(),
        Some(Error::CheckpointEmpty)
    );
    let mut written = [(0u8, 0u32); 3];
    for w in written.iter_mut() {
        for _ in 0..100 {
            v.step(&reference::inputs_at(v.time_ms()));
        }
        let info = LAYOUT.save(&v, &mut st, &mut scratch).unwrap();
        *w = (info.slot, info.sequence);
        // Size of a reference-vessel checkpoint (f32): header 28 + 8 (volume
        // hi, lo) + 24 (3 amounts) + 12 (held) + 4 (temperature) + the time
        // in ms as a varint (1–10 bytes).
        assert!(info.bytes <= 28 + 8 + 24 + 12 + 4 + 10, "{}", info.bytes);
    }
    assert_eq!(written, [(0, 1), (1, 2), (0, 3)]);
    let (state, report) = LAYOUT.restore(&v, &mut st, &mut scratch).unwrap();
    assert_eq!(state, v.state());
    assert_eq!(
        report,
        RestoreReport {
            slot: 0,
            sequence: 3,
            other: OtherSlot::Older(2)
        }
    );
    let mut fresh = reference::vessel::<f32>().unwrap();
    LAYOUT
        .restore_into(&mut fresh, &mut st, &mut scratch)
        .unwrap();
    assert_eq!(fresh.state(), v.state());
    assert_eq!(LAYOUT.check_slot(1, &v, &mut st, &mut scratch), Ok(2));
}

#[test]
fn sizes() {
    // Prints the sizes quoted in the report (run with --nocapture).
    let mut mem = [0u8; MEM];
    let mut st = MemStorage::new(&mut mem);
    let mut scratch = [0u8; SLOT as usize];
    let mut v = reference::vessel::<f32>().unwrap();
    for _ in 0..3600 {
        v.step(&reference::inputs_at(v.time_ms()));
    }
    let vb = LAYOUT.save(&v, &mut st, &mut scratch).unwrap().bytes;
    let mut o = observer::<f32>();
    let empty = LAYOUT.save(&o, &mut st, &mut scratch).unwrap().bytes;
    for k in 0..20 {
        drive(&mut o, k);
    }
    assert_eq!(o.pending_lab_samples(), 1);
    let one = LAYOUT.save(&o, &mut st, &mut scratch).unwrap().bytes;
    std::println!(
        "reference vessel f32: {vb} B; observer f32 (D=5, L=2): {empty} B, with one pending lab sample {one} B"
    );
    // 28 + 8 + 24 + 12 + 4 + 4 (3 600 000 ms as a varint) = 80.
    assert_eq!(vb, 80);
    // One pending sample adds id, time, predicted, ph (5), s, M (25).
    assert!(one - empty >= 4 * (1 + 5 + 1 + 25) && one - empty <= 4 * 32 + 15);
}

#[test]
fn torn_write_at_every_offset_restores_the_previous_state() {
    let mut mem = [0xFFu8; MEM];
    let mut scratch = [0u8; SLOT as usize];
    let mut o = observer::<f32>();
    let mut st = MemStorage::new(&mut mem);
    for k in 0..50 {
        drive(&mut o, k);
    }
    LAYOUT.save(&o, &mut st, &mut scratch).unwrap(); // A: slot 0, seq 1
    for k in 50..100 {
        drive(&mut o, k);
    }
    let b = o.state();
    assert_eq!(LAYOUT.save(&o, &mut st, &mut scratch).unwrap().slot, 1); // B
    assert_eq!(b.pending_lab_samples(), 1);
    let base: std::vec::Vec<u8> = st.bytes().to_vec();
    for k in 100..120 {
        drive(&mut o, k);
    }
    // (C too has the sample drawn at tick 10 pending.)
    assert_eq!(o.pending_lab_samples(), 1);
    // C would go to slot 0 (over A); find its length.
    let c = o.state();
    let (len, complete) = {
        let mut copy = base.clone();
        let mut s = MemStorage::new(&mut copy);
        let len = LAYOUT.save(&o, &mut s, &mut scratch).unwrap().bytes as usize;
        (len, copy[64..64 + len].to_vec())
    };
    let mut tried = 0;
    let mut whole = 0;
    for k in 0..len {
        let mut copy = base.clone();
        let mut torn = Torn {
            inner: MemStorage::new(&mut copy),
            budget: Some(k),
        };
        assert_eq!(
            LAYOUT.save(&o, &mut torn, &mut scratch).err(),
            Some(Error::StorageIo)
        );
        let mut fresh = observer::<f32>();
        let report = LAYOUT
            .restore_into(&mut fresh, &mut torn, &mut scratch)
            .unwrap();
        tried += 1;
        if torn.inner.bytes()[64..64 + len] == complete[..] {
            // The bytes not written already equalled C's (A's last bytes
            // were the same): the slot holds C entirely, and C is restored.
            assert_eq!((report.slot, report.sequence), (0, 3), "torn at {k}");
            assert_eq!(fresh.state(), c);
            whole += 1;
            continue;
        }
        assert_eq!((report.slot, report.sequence), (1, 2), "torn at {k}");
        assert_eq!(fresh.state(), b, "torn at {k}");
        // Slot 0 is either still A (the torn prefix equals A's bytes: the
        // magic, the version…) and reported as older, or damaged and
        // reported as rejected.
        let slot0 = 64..64 + len;
        let unchanged = torn.inner.bytes()[slot0.clone()] == base[slot0];
        match report.other {
            OtherSlot::Older(1) => assert!(unchanged, "torn at {k}"),
            OtherSlot::Rejected(e) => {
                assert!(!unchanged, "torn at {k}");
                assert!(
                    matches!(e, Error::CheckpointCrcMismatch | Error::CheckpointEmpty),
                    "torn at {k}: {e:?}"
                );
            }
            other => panic!("torn at {k}: {other:?}"),
        }
        // The next save goes to the torn slot again, after B.
        torn.budget = None;
        let info = LAYOUT.save(&o, &mut torn, &mut scratch).unwrap();
        assert_eq!((info.slot, info.sequence), (0, 3));
    }
    assert_eq!(tried, len);
    assert!(len > 300, "{len}");
    assert!(whole < 16, "{whole}");
    std::println!("torn writes tried: {tried} offsets ({whole} whole: the rest already matched)");

    // A first save torn anywhere leaves nothing valid, and says so.
    for k in [0, 1, 4, 27, 28, 100, len - 1] {
        let mut blank = [0xFFu8; MEM];
        let mut torn = Torn {
            inner: MemStorage::new(&mut blank),
            budget: Some(k),
        };
        let _ = LAYOUT.save(&o, &mut torn, &mut scratch);
        let r = LAYOUT.restore(&o, &mut torn, &mut scratch).err();
        assert!(
            matches!(
                r,
                Some(Error::CheckpointEmpty) | Some(Error::CheckpointCrcMismatch)
            ),
            "{k}: {r:?}"
        );
    }
}

#[test]
fn every_single_bit_flip_is_rejected() {
    let mut mem = [0xFFu8; MEM];
    let mut scratch = [0u8; SLOT as usize];
    let mut o = observer::<f32>();
    let mut st = MemStorage::new(&mut mem);
    for k in 0..40 {
        drive(&mut o, k);
    }
    LAYOUT.save(&o, &mut st, &mut scratch).unwrap(); // slot 0
    let a = o.state();
    for k in 40..80 {
        drive(&mut o, k);
    }
    let info = LAYOUT.save(&o, &mut st, &mut scratch).unwrap(); // slot 1
    let start = (64 + SLOT) as usize;
    let mut flips = 0;
    for byte in start..start + info.bytes as usize {
        for bit in 0..8 {
            st.bytes_mut()[byte] ^= 1 << bit;
            let reason = LAYOUT.check_slot(1, &o, &mut st, &mut scratch).err();
            assert!(
                matches!(
                    reason,
                    Some(Error::CheckpointEmpty) | Some(Error::CheckpointCrcMismatch)
                ),
                "byte {byte} bit {bit}: {reason:?}"
            );
            let (state, report) = LAYOUT.restore(&o, &mut st, &mut scratch).unwrap();
            assert_eq!(state, a);
            assert_eq!((report.slot, report.sequence), (0, 1));
            assert_eq!(report.other, OtherSlot::Rejected(reason.unwrap()));
            st.bytes_mut()[byte] ^= 1 << bit;
            flips += 1;
        }
    }
    assert_eq!(flips, 8 * info.bytes as usize);
    std::println!("single-bit flips tried: {flips}");
    // Undamaged, the newer slot is taken again.
    let (_, report) = LAYOUT.restore(&o, &mut st, &mut scratch).unwrap();
    assert_eq!(report.slot, 1);
}

#[test]
fn another_config_or_version_is_refused_with_its_reason() {
    let mut mem = [0xFFu8; MEM];
    let mut scratch = [0u8; SLOT as usize];
    let mut st = MemStorage::new(&mut mem);
    let v = reference::vessel::<f32>().unwrap();
    LAYOUT.save(&v, &mut st, &mut scratch).unwrap();

    // Another tick length.
    let m = reference::model::<f32>().unwrap();
    let spec = VesselSpec {
        geometry: m.geometry().clone(),
        outlets: m.outlets.clone(),
        reactions: HVec::new(),
        min_holdup: m.min_holdup(),
        tick_ms: 500,
        method: Method::Auto,
    };
    let other: Vessel<f32, 3, 2, 1> = Vessel::new(
        Model::new(spec).unwrap(),
        &crate::InitialState {
            volume: 1.0,
            concentrations: [0.0; 3],
            temperature: 300.0,
        },
    )
    .unwrap();
    // One slot blank, the other refused: the refusal is the reason.
    assert_eq!(
        LAYOUT.restore(&other, &mut st, &mut scratch).err(),
        Some(Error::CheckpointConfigMismatch)
    );
    // Another scalar type.
    let v64 = reference::vessel::<f64>().unwrap();
    assert_eq!(
        LAYOUT.restore(&v64, &mut st, &mut scratch).err(),
        Some(Error::CheckpointConfigMismatch)
    );
    // An observer where a vessel was saved.
    let o = observer::<f32>();
    assert_eq!(
        LAYOUT.restore(&o, &mut st, &mut scratch).err(),
        Some(Error::CheckpointKind)
    );
    // Another observer tuning.
    // (Neither slot held an observer checkpoint: it goes to slot 0.)
    let info = LAYOUT.save(&o, &mut st, &mut scratch).unwrap();
    assert_eq!((info.slot, info.sequence), (0, 1));
    let retuned: RefObserver<f32> =
        Observer::new(reference::vessel::<f32>().unwrap(), observer_spec(6.63)).unwrap();
    let reason = LAYOUT.check_slot(0, &retuned, &mut st, &mut scratch).err();
    assert_eq!(reason, Some(Error::CheckpointConfigMismatch));
    // Saving after a configuration change overwrites the foreign slots
    // without complaint and is restored.
    LAYOUT.save(&retuned, &mut st, &mut scratch).unwrap();
    assert!(LAYOUT.restore(&retuned, &mut st, &mut scratch).is_ok());

    // Another format version, with correct CRCs.
    let mut mem2 = [0xFFu8; MEM];
    let mut st2 = MemStorage::new(&mut mem2);
    let info = LAYOUT.save(&v, &mut st2, &mut scratch).unwrap();
    let addr = LAYOUT.slot_addr(info.slot, st2.capacity()).unwrap() as usize;
    st2.bytes_mut()[addr + 4] = FORMAT_VERSION as u8 + 1;
    let crc = crc32(&st2.bytes()[addr..addr + 24]).to_le_bytes();
    st2.bytes_mut()[addr + 24..addr + 28].copy_from_slice(&crc);
    assert_eq!(
        LAYOUT.restore(&v, &mut st2, &mut scratch).err(),
        Some(Error::CheckpointVersion)
    );
    for e in [
        Error::CheckpointVersion,
        Error::CheckpointConfigMismatch,
        Error::CheckpointKind,
        Error::CheckpointCrcMismatch,
        Error::CheckpointEmpty,
        Error::CheckpointNoValidSlot,
        Error::CheckpointInvalidState,
    ] {
        assert!(!e.message().is_empty());
    }
}

/// Restore-then-continue equals never having stopped, bit for bit.
fn continue_bit_identical<S: Scalar + Serialize + DeserializeOwned>() {
    let mut mem = [0xFFu8; MEM];
    let mut scratch = [0u8; SLOT as usize];
    let mut st = MemStorage::new(&mut mem);
    let mut a = observer::<S>();
    // Stop with a lab sample pending (drawn at 610, result at 730).
    for k in 0..700 {
        drive(&mut a, k);
    }
    assert_eq!(a.pending_lab_samples(), 1);
    LAYOUT.save(&a, &mut st, &mut scratch).unwrap();
    let mut b = observer::<S>();
    assert!(!bits_equal(&a, &b));
    LAYOUT.restore_into(&mut b, &mut st, &mut scratch).unwrap();
    assert!(bits_equal(&a, &b));
    for k in 700..2000 {
        drive(&mut a, k);
        drive(&mut b, k);
        assert!(bits_equal(&a, &b), "diverged at tick {k}");
    }
    assert!(a.counters().composition_accepted >= 2);
}

#[test]
fn restore_then_continue_is_bit_identical_f32() {
    continue_bit_identical::<f32>();
}

#[test]
fn restore_then_continue_is_bit_identical_f64() {
    continue_bit_identical::<f64>();
}

#[test]
fn invalid_decoded_state_is_refused_and_the_older_slot_taken() {
    let mut mem = [0xFFu8; MEM];
    let mut scratch = [0u8; SLOT as usize];
    let mut st = MemStorage::new(&mut mem);
    let mut o = observer::<f32>();
    for k in 0..30 {
        drive(&mut o, k);
    }
    LAYOUT.save(&o, &mut st, &mut scratch).unwrap(); // slot 0
    let older = o.state();
    for k in 30..60 {
        drive(&mut o, k);
    }
    LAYOUT.save(&o, &mut st, &mut scratch).unwrap(); // slot 1
    let h = read_header(&mut st, 1);
    let mut payload = [0u8; SLOT as usize];
    let good = postcard::to_slice(&o.state(), &mut payload)
        .unwrap()
        .to_vec();
    let mut vbuf = [0u8; 128];
    let vlen = postcard::to_slice(o.state().vessel(), &mut vbuf)
        .unwrap()
        .len();
    let p_at = vlen + 4 * 5; // after the vessel part and the 5 biases
    let cap = reference::model::<f32>().unwrap().capacity();
    let f = |x: f32| x.to_le_bytes();
    let cases: [(&str, usize, [u8; 4]); 8] = [
        ("NaN volume", 0, f(f32::NAN)),
        ("volume over capacity", 0, f(cap * 1.01)),
        ("negative volume", 0, f(-0.1)),
        ("negative amount", 8, f(-1.0)),
        ("infinite held concentration", 32, f(f32::INFINITY)),
        ("asymmetric covariance", p_at + 4, f(12345.0)),
        ("negative variance", p_at, f(-1.0)),
        ("NaN bias", vlen, f(f32::NAN)),
    ];
    for (what, at, bytes) in cases {
        let mut bad = good.clone();
        bad[at..at + 4].copy_from_slice(&bytes);
        write_record(&mut st, 1, h, &bad);
        assert_eq!(
            LAYOUT.check_slot(1, &o, &mut st, &mut scratch),
            Err(Error::CheckpointInvalidState),
            "{what}"
        );
        let (state, report) = LAYOUT.restore(&o, &mut st, &mut scratch).unwrap();
        assert_eq!(state, older, "{what}");
        assert_eq!(
            report.other,
            OtherSlot::Rejected(Error::CheckpointInvalidState),
            "{what}"
        );
        // restore_into leaves a target alone when nothing valid is found.
    }
    // Bytes left over after the state, and a truncated state: not decoded.
    let mut long = good.clone();
    long.push(0);
    write_record(&mut st, 1, h, &long);
    assert_eq!(
        LAYOUT.check_slot(1, &o, &mut st, &mut scratch),
        Err(Error::CheckpointDecode)
    );
    write_record(&mut st, 1, h, &good[..good.len() - 1]);
    assert_eq!(
        LAYOUT.check_slot(1, &o, &mut st, &mut scratch),
        Err(Error::CheckpointDecode)
    );
    // Both slots invalid for different reasons: no valid slot, and the
    // target is unchanged.
    let hdr0 = read_header(&mut st, 0);
    write_record(&mut st, 0, hdr0, &good[..10]);
    let mut target = observer::<f32>();
    let before = target.state();
    assert_eq!(
        LAYOUT
            .restore_into(&mut target, &mut st, &mut scratch)
            .err(),
        Some(Error::CheckpointDecode)
    );
    write_record(&mut st, 1, h, &long);
    let bad0 = {
        let mut b = good.clone();
        b[0..4].copy_from_slice(&f(f32::NAN));
        b
    };
    write_record(&mut st, 0, hdr0, &bad0);
    assert_eq!(
        LAYOUT
            .restore_into(&mut target, &mut st, &mut scratch)
            .err(),
        Some(Error::CheckpointNoValidSlot)
    );
    assert_eq!(target.state(), before);
}

#[test]
fn save_and_restore_errors() {
    let v = reference::vessel::<f32>().unwrap();
    let mut scratch = [0u8; 256];
    // Slot too small for the state.
    let mut mem = [0u8; 256];
    let mut st = MemStorage::new(&mut mem);
    assert_eq!(
        Checkpoints::new(0, 60)
            .save(&v, &mut st, &mut scratch)
            .err(),
        Some(Error::CheckpointTooLarge)
    );
    // Scratch too small.
    assert_eq!(
        Checkpoints::new(0, 128)
            .save(&v, &mut st, &mut scratch[..40])
            .err(),
        Some(Error::CheckpointTooLarge)
    );
    assert_eq!(
        Checkpoints::new(0, 128)
            .save(&v, &mut st, &mut scratch[..10])
            .err(),
        Some(Error::CheckpointTooLarge)
    );
    // Slots beyond the storage, overflowing, or smaller than a header.
    for layout in [
        Checkpoints::new(0, 129),
        Checkpoints::new(u32::MAX - 10, 100),
        Checkpoints::new(0, u32::MAX),
        Checkpoints::new(0, HEADER_LEN as u32),
    ] {
        assert_eq!(
            layout.save(&v, &mut st, &mut scratch).err(),
            Some(Error::CheckpointLayout)
        );
        assert_eq!(
            layout.restore(&v, &mut st, &mut scratch).err(),
            Some(Error::CheckpointLayout)
        );
    }
    // A failing device.
    assert_eq!(
        Checkpoints::new(0, 128)
            .save(&v, &mut Broken, &mut scratch)
            .err(),
        Some(Error::StorageIo)
    );
    assert_eq!(
        Checkpoints::new(0, 128)
            .restore(&v, &mut Broken, &mut scratch)
            .err(),
        Some(Error::StorageIo)
    );
    // A header claiming more than the slot holds.
    let layout = Checkpoints::new(0, 128);
    layout.save(&v, &mut st, &mut scratch).unwrap();
    let fp = v.fingerprint().unwrap();
    let h = Header {
        kind: KIND_VESSEL,
        sequence: 9,
        fingerprint: fp,
        len: 200,
        payload_crc: 0,
    };
    st.write(128, &h.encode()).unwrap();
    assert_eq!(
        layout.check_slot(1, &v, &mut st, &mut scratch),
        Err(Error::CheckpointTooLarge)
    );
    // The valid slot 0 is still restored.
    assert_eq!(layout.restore(&v, &mut st, &mut scratch).unwrap().1.slot, 0);
}

#[test]
fn sequence_numbers_wrap() {
    assert!(newer(1, 0));
    assert!(newer(0, u32::MAX));
    assert!(!newer(u32::MAX, 0));
    assert!(!newer(5, 5));
    // A save after a checkpoint with sequence u32::MAX writes 0 and is
    // taken as the newer.
    let v = reference::vessel::<f32>().unwrap();
    let mut mem = [0xFFu8; MEM];
    let mut st = MemStorage::new(&mut mem);
    let mut scratch = [0u8; 256];
    let mut payload = [0u8; 128];
    let p = postcard::to_slice(&v.state(), &mut payload)
        .unwrap()
        .to_vec();
    let h = Header {
        kind: KIND_VESSEL,
        sequence: u32::MAX,
        fingerprint: v.fingerprint().unwrap(),
        len: 0,
        payload_crc: 0,
    };
    write_record(&mut st, 1, h, &p);
    let info = LAYOUT.save(&v, &mut st, &mut scratch).unwrap();
    assert_eq!((info.slot, info.sequence), (0, 0));
    let (_, r) = LAYOUT.restore(&v, &mut st, &mut scratch).unwrap();
    assert_eq!(
        (r.slot, r.sequence, r.other),
        (0, 0, OtherSlot::Older(u32::MAX))
    );
}

fn reference_spec() -> VesselSpec<f32, 3, 2, 1> {
    let geometry = Geometry::new(Shape::VerticalCylinder {
        diameter: 1.6,
        height: 2.0,
        bottom: Bottom::Dished { depth: 0.25 },
    })
    .unwrap();
    let mut reactions = HVec::new();
    reactions
        .push(ReactionSpec {
            stoichiometry: [-1.0, -1.0, 1.0],
            forward: Kinetics {
                rate_constant: 1.1e-4,
                activation_energy: 41_000.0,
                orders: [1.0, 1.0, 0.0],
            },
            reverse: None,
            reference_temperature: 298.15,
        })
        .unwrap();
    reactions
        .push(ReactionSpec {
            stoichiometry: [-1.0, 0.0, 0.0],
            forward: Kinetics {
                rate_constant: 2e-6,
                activation_energy: 0.0,
                orders: [1.0, 0.0, 0.0],
            },
            reverse: None,
            reference_temperature: 298.15,
        })
        .unwrap();
    VesselSpec {
        geometry,
        outlets: HVec::from_slice(&[Outlet::Measured]).unwrap(),
        reactions,
        min_holdup: 0.05,
        tick_ms: 1000,
        method: Method::Auto,
    }
}

#[test]
fn spec_round_trip_is_validated_once() {
    let spec = reference_spec();
    let mut buf = [0u8; 512];
    let n = spec.encode(&mut buf).unwrap();
    let bytes = buf[..n].to_vec();
    let bytes = &bytes[..];
    let decoded = VesselSpec::<f32, 3, 2, 1>::decode(bytes).unwrap();
    let mut again = [0u8; 512];
    let m = decoded.encode(&mut again).unwrap();
    assert_eq!(&again[..m], bytes);
    // The decoded spec builds the same model as the reference (same
    // fingerprint, so the reference's checkpoints restore into it).
    let model = Model::new(decoded).unwrap();
    let from_bytes = Vessel::new(
        model,
        &crate::InitialState {
            volume: 2.5,
            concentrations: [5.0, 5.0, 40.0],
            temperature: 298.15,
        },
    )
    .unwrap();
    assert_eq!(
        from_bytes.fingerprint(),
        reference::vessel::<f32>().unwrap().fingerprint()
    );
    // Too small a buffer.
    assert_eq!(spec.encode(&mut buf[..10]), Err(Error::ConfigEncode));
    // Every truncation and a trailing byte: ConfigDecode, no panic.
    for k in 0..n {
        assert!(
            VesselSpec::<f32, 3, 2, 1>::decode(&bytes[..k]).is_err(),
            "{k}"
        );
    }
    let mut long = bytes.to_vec();
    long.push(0);
    assert_eq!(
        VesselSpec::<f32, 3, 2, 1>::decode(&long).err(),
        Some(Error::ConfigDecode)
    );
    // Every byte inverted: an error or a spec that Model::new then judges;
    // never a panic.
    let mut outcomes = [0usize; 2];
    for k in 0..n {
        let mut c = bytes.to_vec();
        c[k] ^= 0xFF;
        match VesselSpec::<f32, 3, 2, 1>::decode(&c).and_then(Model::new) {
            Ok(_) => outcomes[0] += 1,
            Err(_) => outcomes[1] += 1,
        }
    }
    assert!(outcomes[1] > 0);
    // An encoded invalid geometry gives the geometry's own error; an
    // encoded zero tick decodes and is refused by Model::new.
    let bad_shape = (
        Shape::VerticalCylinder {
            diameter: -1.6f32,
            height: 2.0,
            bottom: Bottom::Flat,
        },
        &spec.outlets,
        &spec.reactions,
        spec.min_holdup,
        spec.tick_ms,
        spec.method,
    );
    let n = postcard::to_slice(&bad_shape, &mut buf).unwrap().len();
    assert_eq!(
        VesselSpec::<f32, 3, 2, 1>::decode(&buf[..n]).err(),
        Some(Error::GeometryNonPositive)
    );
    let mut zero_tick = spec.clone();
    zero_tick.tick_ms = 0;
    let n = zero_tick.encode(&mut buf).unwrap();
    let decoded = VesselSpec::<f32, 3, 2, 1>::decode(&buf[..n]).unwrap();
    assert_eq!(Model::new(decoded).err(), Some(Error::ConfigZeroTick));
    // A list longer than its capacity: five outlets into O = 1.
    let mut five: HVec<Outlet<f32>, 5> = HVec::new();
    for _ in 0..5 {
        five.push(Outlet::Measured).unwrap();
    }
    let over = (
        Shape::Sphere { diameter: 1.0f32 },
        &five,
        &spec.reactions,
        spec.min_holdup,
        spec.tick_ms,
        spec.method,
    );
    let n = postcard::to_slice(&over, &mut buf).unwrap().len();
    assert_eq!(
        VesselSpec::<f32, 3, 2, 1>::decode(&buf[..n]).err(),
        Some(Error::ConfigDecode)
    );
}

#[test]
fn observer_spec_round_trip_is_validated_once() {
    let spec = observer_spec::<f32>(9.0);
    let mut buf = [0u8; 256];
    let n = spec.encode(&mut buf).unwrap();
    let decoded = ObserverSpec::<f32, 3>::decode(&buf[..n]).unwrap();
    assert_eq!(decoded, spec);
    let o: RefObserver<f32> = Observer::new(reference::vessel().unwrap(), decoded).unwrap();
    assert_eq!(o.fingerprint(), observer::<f32>().fingerprint());
    let mut bad = spec.clone();
    bad.gate = -1.0;
    let n = bad.encode(&mut buf).unwrap();
    let decoded = ObserverSpec::<f32, 3>::decode(&buf[..n]).unwrap();
    let r: Result<RefObserver<f32>, _> = Observer::new(reference::vessel().unwrap(), decoded);
    assert_eq!(r.err(), Some(Error::ObserverConfig));
    for k in 0..n {
        assert_eq!(
            ObserverSpec::<f32, 3>::decode(&buf[..k]).err(),
            Some(Error::ConfigDecode)
        );
    }
}

#[test]
fn diagnostics_monitors_round_trip_and_refuse_another_configuration() {
    use crate::diagnostics::{ChiSquareBounds, ClosureConfig, ClosureMonitor, NisMonitor};
    let cfg = ClosureConfig {
        window_ticks: 30,
        tick_ms: 1000,
        holdup_noise: 0.003f32,
        net_flow_noise: 1e-5,
        k: 0.5,
        h: 5.0,
    };
    let mut a = ClosureMonitor::new(&cfg).unwrap();
    let mut nis_a: NisMonitor<f32, 20> =
        NisMonitor::new(ChiSquareBounds::new(0.95).unwrap()).unwrap();
    // A residual that drifts (more out than in) and NIS values, part-way
    // through a window and with the CUSUM charged.
    for k in 0..95u32 {
        a.update(Some(2.0 - 0.0004 * k as f32), 0.0);
        nis_a.update(0.5 + (k % 5) as f32, 1);
    }
    let mut mem = [0xFFu8; MEM];
    let mut st = MemStorage::new(&mut mem);
    let mut scratch = [0u8; 1024];
    let closure_slots = Checkpoints::new(64, 512);
    let nis_slots = Checkpoints::new(64 + 1024, 512);
    closure_slots.save(&a, &mut st, &mut scratch).unwrap();
    nis_slots.save(&nis_a, &mut st, &mut scratch).unwrap();

    // Restore into fresh monitors of the same configuration: then both
    // continue identically (bit for bit).
    let mut b = ClosureMonitor::new(&cfg).unwrap();
    let mut nis_b: NisMonitor<f32, 20> =
        NisMonitor::new(ChiSquareBounds::new(0.95).unwrap()).unwrap();
    closure_slots
        .restore_into(&mut b, &mut st, &mut scratch)
        .unwrap();
    nis_slots
        .restore_into(&mut nis_b, &mut st, &mut scratch)
        .unwrap();
    assert_eq!(a, b);
    for k in 95..200u32 {
        let z = Some(2.0 - 0.0004 * k as f32);
        assert_eq!(a.update(z, 0.0), b.update(z, 0.0));
        let x = 0.5 + (k % 5) as f32;
        assert_eq!(nis_a.update(x, 1), nis_b.update(x, 1));
    }

    // Another CUSUM interval or test probability: refused with its reason.
    let mut other = ClosureMonitor::new(&ClosureConfig { h: 4.0, ..cfg }).unwrap();
    assert_eq!(
        closure_slots
            .restore_into(&mut other, &mut st, &mut scratch)
            .err(),
        Some(Error::CheckpointConfigMismatch)
    );
    let mut nis_other: NisMonitor<f32, 20> =
        NisMonitor::new(ChiSquareBounds::new(0.99).unwrap()).unwrap();
    assert_eq!(
        nis_slots
            .restore_into(&mut nis_other, &mut st, &mut scratch)
            .err(),
        Some(Error::CheckpointConfigMismatch)
    );
    // A closure record is not a NIS record.
    let mut wrong_kind: NisMonitor<f32, 20> =
        NisMonitor::new(ChiSquareBounds::new(0.95).unwrap()).unwrap();
    assert!(closure_slots
        .restore_into(&mut wrong_kind, &mut st, &mut scratch)
        .is_err());
}
