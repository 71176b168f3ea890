//! The live status line: what the input registers say, decoded, and the
//! server's counters.

use std::sync::atomic::Ordering;

use holdup_kernel::modbus::{RegisterMap, WordOrder};

use super::Stats;

/// The NE107 letter of a status code (input register 6).
pub fn status_letter(code: u16) -> char {
    match code {
        0 => '-',
        1 => 'M',
        2 => 'S',
        3 => 'C',
        _ => 'F',
    }
}

/// Decodes the input registers for the status line.
#[derive(Clone, Debug)]
pub struct StatusLine {
    map: RegisterMap,
    order: WordOrder,
    species: Vec<String>,
}

impl StatusLine {
    /// For a plant's map, word order and species names.
    pub fn new(map: RegisterMap, order: WordOrder, species: Vec<String>) -> Self {
        Self {
            map,
            order,
            species,
        }
    }

    fn f32_at(&self, regs: &[u16], a: u16) -> f32 {
        let a = usize::from(a);
        match regs.get(a..a + 2) {
            Some(w) => f32::from_bits(self.order.join([w[0], w[1]])),
            None => f32::NAN,
        }
    }

    /// One line: holdup ±σ, each concentration ±σ, NE107 status, ticks,
    /// requests, clients and late ticks.
    pub fn render(&self, regs: &[u16], stats: &Stats) -> String {
        let m = &self.map;
        let h = m.holdup_address();
        let mut line = format!(
            "holdup {:.4} ± {:.4} m³",
            self.f32_at(regs, h),
            self.f32_at(regs, h + 2)
        );
        for (i, name) in (0u8..).zip(self.species.iter()) {
            let a = m.concentration_address(i);
            line.push_str(&format!(
                " | {name} {:.4} ± {:.4}",
                self.f32_at(regs, a),
                self.f32_at(regs, a + 2)
            ));
        }
        let ticks = regs.get(2..4).map_or(0, |w| self.order.join([w[0], w[1]]));
        line.push_str(&format!(
            " mol/m³ | status {} | ticks {ticks} | requests {} | clients {} | late ticks {}",
            status_letter(regs.get(6).copied().unwrap_or(4)),
            stats.requests.load(Ordering::Relaxed),
            stats.clients.load(Ordering::Relaxed),
            stats.late_ticks.load(Ordering::Relaxed),
        ));
        line
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use holdup_kernel::modbus::Dims;

    #[test]
    fn the_line_decodes_the_registers_in_their_word_order() {
        let map = RegisterMap::new(Dims {
            species: 1,
            inlets: 1,
            outlets: 1,
            biases: 0,
        })
        .unwrap();
        let order = WordOrder::LowFirst;
        let mut regs = vec![0u16; usize::from(map.input_len())];
        let mut put = |a: u16, x: f32| {
            let w = order.split(x.to_bits());
            regs[usize::from(a)..usize::from(a) + 2].copy_from_slice(&w);
        };
        // 2.5 and 0.125 are exact in binary (IEEE 754), so the printout is too.
        put(map.holdup_address(), 2.5);
        put(map.holdup_address() + 2, 0.125);
        put(map.concentration_address(0), 40.0);
        regs[6] = 2;
        regs[2] = 7;
        let line = StatusLine::new(map, order, vec!["A".into()]).render(&regs, &Stats::default());
        assert!(
            line.starts_with("holdup 2.5000 ± 0.1250 m³ | A 40.0000 ± 0.0000"),
            "{line}"
        );
        assert!(line.contains("status S | ticks 7 |"), "{line}");
    }
}
