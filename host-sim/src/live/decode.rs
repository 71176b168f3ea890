//! A tag's value from the PLC's registers: the stored type in its word
//! order, then `raw · scale + offset` into the tag's configured unit (the
//! unit the replay converts to SI).

use crate::plant::{PlcPoint, PlcType};
use holdup_kernel::modbus::WordOrder;

/// The raw value of `kind` stored in `regs` (lower address first; one or
/// two registers as the type takes), as `f64` (exact for every type).
///
/// Panics never: `regs` shorter than the type reads as NaN.
pub fn raw(kind: PlcType, order: WordOrder, regs: &[u16]) -> f64 {
    let one = regs.first().copied();
    let two = match regs {
        [a, b, ..] => Some(order.join([*a, *b])),
        _ => None,
    };
    let v = match kind {
        PlcType::U16 => one.map(f64::from),
        PlcType::I16 => one.map(|r| f64::from(r as i16)),
        PlcType::U32 => two.map(f64::from),
        PlcType::I32 => two.map(|x| f64::from(x as i32)),
        PlcType::F32 => two.map(|x| f64::from(f32::from_bits(x))),
    };
    v.unwrap_or(f64::NAN)
}

/// The value of `point` in the tag's unit, from the registers starting at
/// its address.
pub fn value(point: &PlcPoint, regs: &[u16]) -> f64 {
    raw(point.kind, point.word_order, regs) * point.scale + point.offset
}

#[cfg(test)]
mod tests {
    //! Expected values computed by hand from the IEEE 754 single-precision
    //! encoding and two's complement (common practice for PLC registers).
    use super::*;
    use crate::plant::PlcTable;

    fn point(kind: PlcType, order: WordOrder, scale: f64, offset: f64) -> PlcPoint {
        PlcPoint {
            unit_id: 1,
            table: PlcTable::Holding,
            address: 0,
            kind,
            word_order: order,
            scale,
            offset,
        }
    }

    #[test]
    fn f32_in_both_word_orders() {
        // 1.0 = 0x3F80_0000; -2.5 = 0xC020_0000; 0.1 ≈ 0x3DCC_CCCD.
        let h = WordOrder::HighFirst;
        let l = WordOrder::LowFirst;
        assert_eq!(raw(PlcType::F32, h, &[0x3F80, 0x0000]), 1.0);
        assert_eq!(raw(PlcType::F32, l, &[0x0000, 0x3F80]), 1.0);
        assert_eq!(raw(PlcType::F32, h, &[0xC020, 0x0000]), -2.5);
        assert_eq!(raw(PlcType::F32, l, &[0x0000, 0xC020]), -2.5);
        assert_eq!(raw(PlcType::F32, h, &[0x3DCC, 0xCCCD]), f64::from(0.1f32));
        // 0x7FC0_0000 is a quiet NaN, 0x7F80_0000 +infinity.
        assert!(raw(PlcType::F32, h, &[0x7FC0, 0x0000]).is_nan());
        assert_eq!(raw(PlcType::F32, h, &[0x7F80, 0x0000]), f64::INFINITY);
    }

    #[test]
    fn integers_signed_and_unsigned() {
        let h = WordOrder::HighFirst;
        let l = WordOrder::LowFirst;
        assert_eq!(raw(PlcType::U16, h, &[0xFFFF]), 65_535.0);
        assert_eq!(raw(PlcType::I16, h, &[0xFFFF]), -1.0);
        assert_eq!(raw(PlcType::I16, h, &[0x8000]), -32_768.0);
        assert_eq!(raw(PlcType::U32, h, &[0x0001, 0x0002]), 65_538.0);
        assert_eq!(raw(PlcType::U32, l, &[0x0002, 0x0001]), 65_538.0);
        assert_eq!(raw(PlcType::U32, h, &[0xFFFF, 0xFFFF]), 4_294_967_295.0);
        assert_eq!(raw(PlcType::I32, h, &[0xFFFF, 0xFFFE]), -2.0);
        assert_eq!(raw(PlcType::I32, l, &[0xFFFE, 0xFFFF]), -2.0);
        assert_eq!(raw(PlcType::I32, h, &[0x8000, 0x0000]), -2_147_483_648.0);
        // Too few registers for the type: no value.
        assert!(raw(PlcType::U32, h, &[0x0001]).is_nan());
        assert!(raw(PlcType::U16, h, &[]).is_nan());
    }

    #[test]
    fn scale_and_offset_into_the_tag_unit() {
        // A level of 1234 counts at 0.001 m per count: 1.234 m.
        let p = point(PlcType::U16, WordOrder::HighFirst, 0.001, 0.0);
        assert_eq!(value(&p, &[1234]), 1234.0 * 0.001);
        // A temperature of -150 in tenths of a degree, offset by 0: -15 degC.
        let p = point(PlcType::I16, WordOrder::HighFirst, 0.1, 0.0);
        assert_eq!(value(&p, &[(-150i16) as u16]), -150.0 * 0.1);
        // A 4–20 mA loop scaled to 0–10 m3/h: 12 mA → (12 − 4)·10/16 = 5.
        let p = point(PlcType::F32, WordOrder::LowFirst, 10.0 / 16.0, -2.5);
        assert_eq!(value(&p, &[0x0000, 0x4140]), 5.0);
    }
}
