use super::*;
use crate::diagnostics::DeviceStatus;
use crate::sensor::tests::{observer, spec};
use crate::sensor::Readings;
use crate::{Error, Quality, Sensor};
use proptest::prelude::*;

/// CRC-16/MODBUS as catalogued by the `crc` crate (poly 0x8005 reflected,
/// init 0xFFFF): the reference every frame here is checked against.
const MODBUS_CRC: crc::Crc<u16> = crc::Crc::<u16>::new(&crc::CRC_16_MODBUS);

/// The tank of the sensor tests (1 species, 1 inlet, 1 measured outlet,
/// level, one inlet-bias state) in `f32`, as the gateway runs it.
type Tank = Sensor<f32, 1, 0, 1, 1, 3, 2>;
type TankLink = Link<f32, 1, 0, 1, 1, 3, 2>;

const UNIT: u8 = 7;

fn link_spec(clock: Clock, word_order: WordOrder) -> LinkSpec {
    LinkSpec {
        unit_id: UNIT,
        word_order,
        clock,
        stale_after_ms: 10_000,
        checkpoints: false,
    }
}

fn tank() -> Tank {
    Tank::observed(observer(100.0), spec(true)).unwrap()
}

fn link(word_order: WordOrder) -> TankLink {
    Link::new(tank(), link_spec(Clock::Sequence, word_order)).unwrap()
}

/// An RTU frame: unit, PDU, CRC (low byte first).
fn rtu(unit: u8, pdu: &[u8]) -> std::vec::Vec<u8> {
    let mut f = std::vec![unit];
    f.extend_from_slice(pdu);
    let crc = MODBUS_CRC.checksum(&f);
    f.extend_from_slice(&crc.to_le_bytes());
    f
}

/// Send `frame` over RTU; the response's CRC checked against the reference.
fn ask(l: &mut TankLink, frame: &[u8]) -> (Served, std::vec::Vec<u8>) {
    let mut out = Response::new();
    let served = l.handle(frame, Framing::Rtu, &mut out);
    if !out.is_empty() {
        let (body, crc) = out.split_at(out.len() - 2);
        assert_eq!(MODBUS_CRC.checksum(body).to_le_bytes(), crc);
        return (served, body.to_vec());
    }
    (served, std::vec::Vec::new())
}

fn read_inputs(l: &mut TankLink, address: u16, count: u16) -> std::vec::Vec<u16> {
    let [a0, a1] = address.to_be_bytes();
    let [c0, c1] = count.to_be_bytes();
    let (served, body) = ask(l, &rtu(UNIT, &[0x04, a0, a1, c0, c1]));
    assert_eq!(served, Served::Reply);
    assert_eq!(body[..3], [UNIT, 0x04, 2 * count as u8]);
    body[3..]
        .chunks_exact(2)
        .map(|b| u16::from_be_bytes([b[0], b[1]]))
        .collect()
}

fn write_holdings(l: &mut TankLink, address: u16, values: &[u16]) -> Served {
    let mut pdu = std::vec![0x10];
    pdu.extend_from_slice(&address.to_be_bytes());
    pdu.extend_from_slice(&(values.len() as u16).to_be_bytes());
    pdu.push(2 * values.len() as u8);
    for v in values {
        pdu.extend_from_slice(&v.to_be_bytes());
    }
    ask(l, &rtu(UNIT, &pdu)).0
}

fn write_coil(l: &mut TankLink, address: u16, on: bool) -> Served {
    let [a0, a1] = address.to_be_bytes();
    ask(l, &rtu(UNIT, &[0x05, a0, a1, if on { 0xFF } else { 0 }, 0])).0
}

fn f32_words(word_order: WordOrder, x: f32) -> [u16; 2] {
    word_order.split(x.to_bits())
}

/// The analog inputs of one tick as a PLC writes them (inlet, feed,
/// outlet, temperature, level), then the sequence raised.
fn write_tick(l: &mut TankLink, r: &Readings<f32, 1, 1, 1>, seq: u16) {
    let w = l.spec().word_order;
    let mut regs = std::vec::Vec::new();
    for x in [
        r.inlet_flows[0],
        r.feed[0][0],
        r.outlet_flows[0],
        r.temperature,
        r.level,
    ] {
        regs.extend_from_slice(&f32_words(w, x));
    }
    let first = l.map().inlet_flow_address(0);
    assert_eq!(write_holdings(l, first, &regs), Served::Reply);
    assert_eq!(write_holdings(l, 0, &[seq]), Served::Reply);
}

/// Readings of tick `n`: the sensor tests' tank with flows 1e-3 m³/s in and
/// out, pseudo-noise on the meters and the level.
fn readings(n: u32) -> Readings<f32, 1, 1, 1> {
    let wobble = |k: u32| ((k.wrapping_mul(2_654_435_761) >> 8) as f32 / 16_777_216.0) - 0.5;
    let area = core::f32::consts::PI;
    Readings {
        inlet_flows: [1e-3 * (1.0 + 0.01 * wobble(3 * n))],
        feed: [[50.0]],
        outlet_flows: [1e-3 * (1.0 + 0.01 * wobble(3 * n + 1))],
        temperature: 293.15,
        level: 10.0 / area + 0.003 * wobble(3 * n + 2),
    }
}

fn f32_at(regs: &[u16], a: u16, w: WordOrder) -> f32 {
    let a = usize::from(a);
    f32::from_bits(w.join([regs[a], regs[a + 1]]))
}

#[test]
fn each_table_is_tiled_by_its_entries() {
    for (species, inlets, outlets, biases) in
        [(1, 1, 1, 1), (3, 2, 1, 1), (8, 4, 3, 4), (0, 0, 0, 0)]
    {
        let map = RegisterMap::new(Dims {
            species,
            inlets,
            outlets,
            biases,
        })
        .unwrap();
        for (table, len) in [
            (Table::Holding, map.holding_len()),
            (Table::Input, map.input_len()),
            (Table::Coil, map.coil_len()),
        ] {
            let mut next = 0;
            for e in map.entries().filter(|e| e.table == table) {
                assert_eq!(
                    e.address, next,
                    "{e:?} of {table:?} leaves a gap or overlaps"
                );
                next += e.kind.width();
            }
            assert_eq!(next, len, "{table:?}");
        }
        // Every stream and species has its entries.
        let count = |f: &dyn Fn(&Item) -> bool| map.entries().filter(|e| f(&e.item)).count();
        assert_eq!(
            count(&|i| matches!(i, Item::Feed(..))),
            usize::from(inlets * species)
        );
        assert_eq!(
            count(&|i| matches!(i, Item::Concentration(_))),
            usize::from(species)
        );
        assert_eq!(count(&|i| matches!(i, Item::Bias(_))), usize::from(biases));
    }
    let too_big = Dims {
        species: 30,
        inlets: 4,
        outlets: 1,
        biases: 0,
    };
    assert_eq!(RegisterMap::new(too_big), Err(Error::LinkMapTooLarge));
}

#[test]
fn words_of_a_float_in_either_order() {
    // IEEE 754 binary32: 1.0 is 0x3F80_0000 (common practice).
    assert_eq!(
        WordOrder::HighFirst.split(1.0f32.to_bits()),
        [0x3F80, 0x0000]
    );
    assert_eq!(
        WordOrder::LowFirst.split(1.0f32.to_bits()),
        [0x0000, 0x3F80]
    );
    for w in [WordOrder::HighFirst, WordOrder::LowFirst] {
        for x in [0u32, 1, 0xDEAD_BEEF, u32::MAX] {
            assert_eq!(w.join(w.split(x)), x);
        }
    }
}

#[test]
fn the_reference_crc_of_a_common_request() {
    // "Read 10 holding registers from 0 of unit 1" is 01 03 00 00 00 0A
    // C5 CD (a common example of Modbus RTU; written from memory, and
    // checked here against the `crc` crate's CRC-16/MODBUS).
    let f = rtu(1, &[0x03, 0, 0, 0, 0x0A]);
    assert_eq!(f[6..], [0xC5, 0xCD]);
}

#[test]
fn a_read_returns_the_estimates_in_the_configured_word_order() {
    for w in [WordOrder::HighFirst, WordOrder::LowFirst] {
        let mut l = link(w);
        write_tick(&mut l, &readings(0), 1);
        assert!(l.sequence_pending());
        l.tick(0);
        assert!(!l.sequence_pending());
        let m = *l.map();
        let regs = read_inputs(&mut l, 0, m.input_len());
        assert_eq!(regs, l.input_registers());
        assert_eq!(regs[0], MAP_VERSION);
        assert_eq!(regs[1], w.code());
        assert_eq!(w.join([regs[2], regs[3]]), 1, "tick count");
        assert_eq!(regs[5], 1, "sequence applied");
        let e = l.sensor().estimate();
        assert_eq!(
            f32_at(&regs, m.holdup_address(), w).to_bits(),
            e.volume.to_bits()
        );
        let c = f32_at(&regs, m.concentration_address(0), w);
        assert_eq!(c.to_bits(), e.concentrations[0].to_bits());
        let sc = f32_at(&regs, m.concentration_address(0) + 2, w);
        assert_eq!(sc.to_bits(), e.concentration_sigma.unwrap()[0].to_bits());
        // The holding registers read back as written.
        let first = m.inlet_flow_address(0);
        let (_, body) = ask(&mut l, &rtu(UNIT, &[0x03, 0, first as u8, 0, 2]));
        let words = [
            u16::from_be_bytes([body[3], body[4]]),
            u16::from_be_bytes([body[5], body[6]]),
        ];
        assert_eq!(words, f32_words(w, readings(0).inlet_flows[0]));
    }
}

#[test]
fn the_link_runs_the_sensor_bit_for_bit() {
    // The same readings and lab events given to a sensor directly and
    // through the registers: every estimate and report identical.
    let mut l = link(WordOrder::LowFirst);
    let mut s = tank();
    let w = l.spec().word_order;
    for n in 0..4000u32 {
        let r = readings(n);
        let now = u64::from(n) * 1000;
        if n == 600 {
            // Sample 17 drawn now ...
            let mut regs = std::vec![0u16; 6];
            regs[0] = 0;
            regs[1..3].copy_from_slice(&w.split(17));
            regs[3..5].copy_from_slice(&f32_words(w, 0.0));
            assert_eq!(write_holdings(&mut l, 3, &regs), Served::Reply);
            assert_eq!(write_holdings(&mut l, 8, &f32_words(w, 0.5)), Served::Reply);
            assert_eq!(write_holdings(&mut l, 1, &[1]), Served::Reply);
            s.lab_drawn(17, 0, 0.5).unwrap();
        }
        if n == 3300 {
            // ... its result 45 min later.
            let c = 100.0 * 0.98;
            assert_eq!(write_holdings(&mut l, 6, &f32_words(w, c)), Served::Reply);
            assert_eq!(write_holdings(&mut l, 2, &[1]), Served::Reply);
            s.lab_result(17, c).unwrap();
        }
        write_tick(&mut l, &r, (n + 1) as u16);
        let a = l.tick(now);
        let b = s.tick(now, &r);
        assert_eq!(a.report, b, "tick {n}");
        assert!(!a.stale);
        if n == 600 {
            assert_eq!(a.lab, Some(LabOutcome::Drawn));
        }
        if n == 3300 {
            assert_eq!(a.lab, Some(LabOutcome::Accepted));
        }
    }
    assert_eq!(l.sensor().estimate(), s.estimate());
    assert_eq!(l.input_registers()[10], LabOutcome::Accepted.code());
}

#[test]
fn stale_inputs_fail_the_status_and_the_sigma_grows() {
    let mut l = Link::new(tank(), link_spec(Clock::Free, WordOrder::HighFirst)).unwrap();
    let m = *l.map();
    let w = WordOrder::HighFirst;
    // Before the PLC writes anything: failure, nothing to estimate from.
    assert_eq!(l.input_registers()[6], status_code(DeviceStatus::Failure));
    write_tick(&mut l, &readings(0), 1);
    let mut sigma_at_stale = None;
    for n in 0..120u64 {
        let t = l.tick(n * 1000);
        let regs = l.input_registers();
        let sigma = f32_at(regs, m.holdup_address() + 2, w);
        // Raised at 0 s; stale from 10 s on.
        assert_eq!(t.stale, n >= 10, "tick {n}");
        if t.stale {
            assert_eq!(regs[6], status_code(DeviceStatus::Failure));
            assert_eq!(regs[7], quality_code(Quality::Bad));
            assert!(LinkFlags::from_bits(regs[9]).contains(LinkFlags::STALE));
            let s0 = *sigma_at_stale.get_or_insert(sigma);
            assert!(sigma >= s0);
        }
    }
    // Without level readings the holdup's σ grows (the concentrations'
    // need not: washout pulls them towards the feed whatever they were).
    let s_end = f32_at(l.input_registers(), m.holdup_address() + 2, w);
    assert!(s_end.is_finite() && s_end > sigma_at_stale.unwrap());
    assert_eq!(l.counters().stale_ticks, 110);
    // The PLC comes back.
    write_tick(&mut l, &readings(120), 2);
    assert!(!l.tick(120_000).stale);
    assert!(!LinkFlags::from_bits(l.input_registers()[9]).contains(LinkFlags::STALE));
}

#[test]
fn a_reset_from_a_lab_result_sets_the_concentration_and_its_sigma() {
    let mut l = link(WordOrder::HighFirst);
    let w = WordOrder::HighFirst;
    write_tick(&mut l, &readings(0), 1);
    l.tick(0);
    assert_eq!(write_holdings(&mut l, 3, &[0]), Served::Reply);
    assert_eq!(
        write_holdings(&mut l, 6, &f32_words(w, 42.0)),
        Served::Reply
    );
    assert_eq!(write_holdings(&mut l, 8, &f32_words(w, 0.5)), Served::Reply);
    assert_eq!(write_coil(&mut l, 0, true), Served::Reply);
    // The coil reads back as set until the tick carries it out.
    let (_, body) = ask(&mut l, &rtu(UNIT, &[0x01, 0, 0, 0, 4]));
    assert_eq!(body, [UNIT, 0x01, 1, 0b0001]);
    // The reset happens before the tick's prediction: compare with the
    // sensor's concentration just before it.
    let mut direct = l.sensor().clone();
    assert!(direct.reset_concentration(0, 42.0, 0.5));
    let (c, sc) = direct.observer().unwrap().concentrations();
    assert!(
        (c[0] - 42.0).abs() < 1e-4 && (sc[0] - 0.5).abs() < 1e-4,
        "{c:?} {sc:?}"
    );
    write_tick(&mut l, &readings(1), 2);
    l.tick(1000);
    assert!(LinkFlags::from_bits(l.input_registers()[9]).contains(LinkFlags::RESET_APPLIED));
    let c = f32_at(l.input_registers(), l.map().concentration_address(0), w);
    assert!((c - 42.0).abs() < 0.1, "{c}");
    let (_, body) = ask(&mut l, &rtu(UNIT, &[0x01, 0, 0, 0, 4]));
    assert_eq!(body, [UNIT, 0x01, 1, 0]);
    // A σ of zero is refused, and said so.
    assert_eq!(write_holdings(&mut l, 8, &f32_words(w, 0.0)), Served::Reply);
    assert_eq!(write_coil(&mut l, 0, true), Served::Reply);
    write_tick(&mut l, &readings(2), 3);
    l.tick(2000);
    assert!(LinkFlags::from_bits(l.input_registers()[9]).contains(LinkFlags::RESET_REFUSED));
}

#[test]
fn bad_requests_get_the_exception_codes_of_the_standard() {
    let mut l = link(WordOrder::HighFirst);
    let inputs = l.map().input_len();
    let holdings = l.map().holding_len();
    let cases: [(std::vec::Vec<u8>, u8); 9] = [
        // 01: discrete inputs are not served; an unknown function.
        (std::vec![0x02, 0, 0, 0, 1], 0x01),
        (std::vec![0x2B, 0x0E, 1, 0, 0, 0], 0x01),
        // 02: past the end of a table.
        (std::vec![0x04, 0, (inputs - 1) as u8, 0, 2], 0x02),
        (std::vec![0x06, 0, holdings as u8, 0, 1], 0x02),
        (std::vec![0x05, 0, 4, 0xFF, 0], 0x02),
        // 03: no registers, too many registers, a coil value that is
        // neither on nor off.
        (std::vec![0x03, 0, 0, 0, 0], 0x03),
        (std::vec![0x04, 0, 0, 0, 126], 0x03),
        (std::vec![0x05, 0, 2, 0x12, 0x34], 0x03),
        // 04: a checkpoint asked of a link that cannot save one.
        (std::vec![0x05, 0, 1, 0xFF, 0], 0x04),
    ];
    for (pdu, code) in cases {
        let (served, body) = ask(&mut l, &rtu(UNIT, &pdu));
        assert_eq!(served, Served::Exception(code), "{pdu:02X?}");
        assert_eq!(body, [UNIT, pdu[0] | 0x80, code], "{pdu:02X?}");
    }
    assert_eq!(l.counters().exceptions, 9);
}

#[test]
fn frames_that_are_not_ours_or_not_whole_get_no_answer() {
    let mut l = link(WordOrder::HighFirst);
    let good = rtu(UNIT, &[0x04, 0, 0, 0, 2]);
    let mut bad_crc = good.clone();
    bad_crc[7] ^= 0x01;
    assert_eq!(ask(&mut l, &bad_crc).0, Served::Silent(Silence::Crc));
    assert_eq!(
        ask(&mut l, &rtu(UNIT + 1, &[0x04, 0, 0, 0, 2])).0,
        Served::Silent(Silence::OtherUnit)
    );
    for cut in 0..good.len() {
        let s = ask(&mut l, &good[..cut]).0;
        assert!(
            matches!(s, Served::Silent(Silence::Broken | Silence::Crc)),
            "{cut}: {s:?}"
        );
    }
    // A bulk write whose byte count runs past the frame.
    let mut lying = rtu(UNIT, &[0x10, 0, 0, 0, 1, 2, 0, 5]);
    lying[6] = 200;
    assert_eq!(ask(&mut l, &lying).0, Served::Silent(Silence::Broken));
    // A broadcast write is applied and not answered.
    assert_eq!(
        ask(&mut l, &rtu(0, &[0x06, 0, 0, 0, 9])).0,
        Served::Silent(Silence::Broadcast)
    );
    assert_eq!(l.holding_registers()[0], 9);
    let c = l.counters();
    assert_eq!((c.crc_errors, c.not_answered), (1, 2));
    assert!(c.broken >= 1);
}

#[test]
fn tcp_frames_echo_the_transaction_and_check_the_length() {
    let mut l = link(WordOrder::HighFirst);
    let mut out = Response::new();
    let req = [0x12, 0x34, 0, 0, 0, 6, UNIT, 0x04, 0, 0, 0, 1];
    assert_eq!(l.handle(&req, Framing::Tcp, &mut out), Served::Reply);
    assert_eq!(out[..9], [0x12, 0x34, 0, 0, 0, 5, UNIT, 0x04, 2]);
    assert_eq!(u16::from_be_bytes([out[9], out[10]]), MAP_VERSION);
    let mut wrong = req;
    wrong[5] = 7;
    assert_eq!(
        l.handle(&wrong, Framing::Tcp, &mut out),
        Served::Silent(Silence::Broken)
    );
    assert!(out.is_empty());
}

proptest! {
    #![proptest_config(ProptestConfig::with_cases(2000))]

    /// Any bytes, in either framing, with or without a valid CRC: no
    /// panic, a response that fits one frame, and the registers the PLC
    /// reads unchanged by anything but a tick.
    #[test]
    fn any_frame_is_answered_or_dropped(
        body in proptest::collection::vec(any::<u8>(), 0..300),
        unit in prop_oneof![Just(UNIT), Just(0u8), any::<u8>()],
        crc in any::<bool>(),
    ) {
        let mut l = link(WordOrder::HighFirst);
        let before = l.input_registers().to_vec();
        let mut out = Response::new();
        let frame = if crc { rtu(unit, &body) } else { body.clone() };
        l.handle(&frame, Framing::Rtu, &mut out);
        prop_assert!(out.len() <= 256);
        l.handle(&body, Framing::Tcp, &mut out);
        prop_assert!(out.len() <= MAX_FRAME);
        prop_assert_eq!(l.input_registers(), &before[..]);
        prop_assert_eq!(l.counters().requests, 2);
    }
}

#[test]
fn a_map_for_fewer_streams_than_the_sensor_holds() {
    let spec = link_spec(Clock::Sequence, WordOrder::HighFirst);
    let dims = |inlets, outlets, biases, species| Dims {
        species,
        inlets,
        outlets,
        biases,
    };
    // No inlet in the map: the sensor's inlet reads zero flow.
    let mut l = Link::with_dims(tank(), spec, dims(0, 1, 1, 1)).unwrap();
    assert_eq!(l.map().holding_len(), 10 + 2 * 3);
    let w = WordOrder::HighFirst;
    let level = f32_words(w, 10.0 / core::f32::consts::PI);
    l.write_holding(l.map().level_address(), &level).unwrap();
    let out = f32_words(w, 1e-3);
    l.write_holding(l.map().outlet_flow_address(0), &out)
        .unwrap();
    l.write_holding(0, &[1]).unwrap();
    l.tick(0);
    let v = l.sensor().estimate().volume;
    assert!((v - (10.0 - 1e-3)).abs() < 1e-4, "{v}");
    // Beyond the sensor's sizes, or another species count: refused.
    for d in [
        dims(2, 1, 1, 1),
        dims(1, 2, 1, 1),
        dims(1, 1, 2, 1),
        dims(1, 1, 1, 2),
    ] {
        assert_eq!(
            Link::with_dims(tank(), spec, d).err(),
            Some(Error::LinkMapTooLarge),
            "{d:?}"
        );
    }
    let bad_unit = LinkSpec { unit_id: 0, ..spec };
    assert_eq!(
        Link::new(tank(), bad_unit).err(),
        Some(Error::ConfigNonPositive)
    );
    // Writes outside the map are refused whole.
    assert_eq!(l.write_holding(15, &[1, 2]), Err(Error::LinkMapTooLarge));
}
