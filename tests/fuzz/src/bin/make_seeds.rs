//! Write seed corpora under tests/fuzz/corpus/<target>/ (run from tests/fuzz).
use holdup_fuzz::{observer_spec, ref_observer, ref_vessel, LAYOUT, MEM};
use holdup_kernel::storage::MemStorage;
use holdup_kernel::{
    reference, Bottom, Geometry, Kinetics, Method, Outlet, ReactionSpec, Shape, VesselSpec,
};
use std::fs;
use std::path::Path;

fn put(target: &str, name: &str, bytes: &[u8]) {
    let dir = Path::new("corpus").join(target);
    fs::create_dir_all(&dir).unwrap();
    fs::write(dir.join(name), bytes).unwrap();
}

fn main() {
    // config_decode: a valid reference VesselSpec and ObserverSpec.
    let spec = ref_spec();
    assert!(holdup_kernel::Model::new(spec.clone()).is_ok());
    let mut buf = [0u8; 1024];
    let n = spec.encode(&mut buf).unwrap();
    put("config_decode", "vessel_spec", &buf[..n]);
    let n = observer_spec().encode(&mut buf).unwrap();
    put("config_decode", "observer_spec", &buf[..n]);

    // checkpoint_decode: valid checkpoints (flag byte 0 and 1).
    let mut scratch = vec![0u8; MEM];
    let mut v = ref_vessel();
    let u = reference::inputs_at::<f32>(0);
    let mut mem = vec![0u8; MEM];
    for _ in 0..3 {
        v.step(&u);
        LAYOUT
            .save(&v, &mut MemStorage::new(&mut mem), &mut scratch)
            .unwrap();
    }
    for flag in [0u8, 1] {
        let mut seed = vec![flag];
        seed.extend_from_slice(&mem);
        put("checkpoint_decode", &format!("vessel_{flag}"), &seed);
    }
    let mut o = ref_observer();
    let mut mem = vec![0u8; MEM];
    for _ in 0..3 {
        o.tick(&u);
        LAYOUT
            .save(&o, &mut MemStorage::new(&mut mem), &mut scratch)
            .unwrap();
    }
    for flag in [0u8, 1] {
        let mut seed = vec![flag];
        seed.extend_from_slice(&mem);
        put("checkpoint_decode", &format!("observer_{flag}"), &seed);
    }
    // modbus_frame: a session of valid requests, RTU with CRCs appended and
    // a tick after each (flag 6), and the same PDUs over TCP (flag 5).
    let pdus: [&[u8]; 5] = [
        &[1, 0x10, 0, 0, 0, 1, 2, 0, 1],
        &[1, 0x04, 0, 0, 0, 40],
        &[1, 0x03, 0, 0, 0, 10],
        &[1, 0x05, 0, 2, 0xFF, 0],
        &[1, 0x01, 0, 0, 0, 4],
    ];
    let mut rtu = vec![6u8];
    let mut tcp = vec![5u8];
    for (k, p) in pdus.iter().enumerate() {
        if k > 0 {
            rtu.extend_from_slice(&[0xFE, 0xED]);
            tcp.extend_from_slice(&[0xFE, 0xED]);
        }
        rtu.extend_from_slice(p);
        tcp.extend_from_slice(&[0, k as u8, 0, 0, 0, p.len() as u8]);
        tcp.extend_from_slice(p);
    }
    put("modbus_frame", "rtu_session", &rtu);
    put("modbus_frame", "tcp_session", &tcp);
}

/// The reference vessel's specification (same values as kernel::reference::model).
fn ref_spec() -> VesselSpec<f32, 3, 2, 1> {
    let geometry = Geometry::new(Shape::VerticalCylinder {
        diameter: 1.6,
        height: 2.0,
        bottom: Bottom::Dished { depth: 0.25 },
    })
    .unwrap();
    let mut outlets = heapless::Vec::new();
    outlets.push(Outlet::Measured).unwrap();
    let mut reactions = heapless::Vec::new();
    let r = |k: f32, ea: f32, st: [f32; 3], ord: [f32; 3]| ReactionSpec {
        stoichiometry: st,
        forward: Kinetics {
            rate_constant: k,
            activation_energy: ea,
            orders: ord,
        },
        reverse: None,
        reference_temperature: 298.15,
    };
    let _ = reactions.push(r(1.1e-4, 41_000.0, [-1.0, -1.0, 1.0], [1.0, 1.0, 0.0]));
    let _ = reactions.push(r(2e-6, 0.0, [-1.0, 0.0, 0.0], [1.0, 0.0, 0.0]));
    VesselSpec {
        geometry,
        outlets,
        reactions,
        min_holdup: 0.05,
        tick_ms: 1000,
        method: Method::Auto,
    }
}
