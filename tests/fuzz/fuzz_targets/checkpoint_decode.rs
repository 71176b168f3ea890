#![no_main]
//! Restore a reference vessel and a reference observer from a MemStorage
//! holding the fuzz bytes. Byte 0 is a flag: bit 0 set = fix up headers and
//! CRCs first (to reach postcard decoding and state checks).
use holdup_fuzz::{fix_up, ref_observer, ref_vessel, LAYOUT, MEM};
use holdup_kernel::reference;
use holdup_kernel::storage::MemStorage;
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Some((&flags, body)) = data.split_first() else {
        return;
    };
    let mut image = vec![0u8; MEM];
    let n = body.len().min(MEM);
    image[..n].copy_from_slice(&body[..n]);
    let mut scratch = vec![0u8; MEM];

    // Vessel.
    let mut vessel = ref_vessel();
    let mut mem = image.clone();
    if flags & 1 != 0 {
        fix_up(&vessel, &mut mem);
    }
    for slot in 0..2 {
        let _ = LAYOUT.check_slot(slot, &vessel, &mut MemStorage::new(&mut mem), &mut scratch);
    }
    if LAYOUT
        .restore_into(&mut vessel, &mut MemStorage::new(&mut mem), &mut scratch)
        .is_ok()
    {
        let u = reference::inputs_at::<f32>(0);
        for _ in 0..3 {
            let _ = vessel.step(&u);
        }
        let _ = LAYOUT.save(&vessel, &mut MemStorage::new(&mut mem), &mut scratch);
    }

    // Observer.
    let mut obs = ref_observer();
    let mut mem = image;
    if flags & 1 != 0 {
        fix_up(&obs, &mut mem);
    }
    for slot in 0..2 {
        let _ = LAYOUT.check_slot(slot, &obs, &mut MemStorage::new(&mut mem), &mut scratch);
    }
    if LAYOUT
        .restore_into(&mut obs, &mut MemStorage::new(&mut mem), &mut scratch)
        .is_ok()
    {
        let u = reference::inputs_at::<f32>(0);
        for _ in 0..3 {
            let _ = obs.tick(&u);
        }
        let _ = LAYOUT.save(&obs, &mut MemStorage::new(&mut mem), &mut scratch);
    }
});
