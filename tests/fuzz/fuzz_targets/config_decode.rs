#![no_main]
//! Decode a VesselSpec (reference sizes) and an ObserverSpec from the same
//! bytes; validate what decodes with Model::new / Observer::new and step it.
use holdup_fuzz::{ref_vessel, RefObserver};
use holdup_kernel::{reference, InitialState, Model, ObserverSpec, Vessel, VesselSpec};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    if let Ok(spec) = VesselSpec::<f32, 3, 2, 1>::decode(data) {
        if let Ok(model) = Model::new(spec) {
            let _ = model.capacity();
            let init = InitialState {
                volume: 1.0,
                concentrations: [5.0, 5.0, 40.0],
                temperature: 298.15,
            };
            if let Ok(mut v) = Vessel::new(model, &init) {
                let u = reference::inputs_at::<f32>(0);
                for _ in 0..3 {
                    let _ = v.step(&u);
                }
            }
        }
    }
    if let Ok(spec) = ObserverSpec::<f32, 3>::decode(data) {
        if let Ok(mut obs) = RefObserver::new(ref_vessel(), spec) {
            let u = reference::inputs_at::<f32>(0);
            for _ in 0..3 {
                let _ = obs.tick(&u);
            }
        }
    }
});
