#![no_main]
//! Frames into the reference sensor's Modbus link. Byte 0 is a flag: bit 0
//! set = Modbus TCP framing (else RTU), bit 1 set = append a valid CRC to
//! each RTU frame (to reach the function handlers), bit 2 set = tick after
//! each frame. The rest is split into frames at `FE ED`. No frame may
//! panic, a response fits one frame, and a tick after any writes stays
//! free of panics whatever was written (the sensor's conditioning takes it).
use holdup_fuzz::{frames, ref_link, MODBUS_CRC};
use holdup_kernel::modbus::{Framing, Response, MAX_FRAME};
use libfuzzer_sys::fuzz_target;

fuzz_target!(|data: &[u8]| {
    let Some((&flags, body)) = data.split_first() else {
        return;
    };
    let framing = if flags & 1 != 0 {
        Framing::Tcp
    } else {
        Framing::Rtu
    };
    let mut link = ref_link();
    let mut out = Response::new();
    for (n, f) in frames(body).enumerate() {
        let mut frame = f.to_vec();
        if framing == Framing::Rtu && flags & 2 != 0 {
            let crc = MODBUS_CRC.checksum(&frame);
            frame.extend_from_slice(&crc.to_le_bytes());
        }
        link.handle(&frame, framing, &mut out);
        assert!(out.len() <= MAX_FRAME);
        if flags & 4 != 0 {
            let _ = link.tick(n as u64 * 1000);
        }
    }
});
