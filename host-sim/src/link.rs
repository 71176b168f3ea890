//! The plant's sensor behind the kernel's register map: what `holdup
//! serve` (a Modbus TCP server) and `holdup live` (a client polling a PLC)
//! drive. The sensor is the replay's ([`crate::replay::assemble`]), so a
//! live run and a replay of the same inputs agree bit for bit.
//!
//! The registers the PLC writes hold SI values (m³/s, mol/m³, K, m): the
//! kernel's channels are configured in SI on the host. The plant's
//! constants (a feed given as a number, a fixed temperature) are written
//! into their registers at start; a PLC may overwrite them.

use holdup_kernel::checkpoint::{Checkpoints, RestoreReport, SlotInfo};
use holdup_kernel::modbus::{
    Dims, Framing, LabOutcome, Link, LinkCounters, LinkSpec, RegisterMap, Response, Served,
};
use holdup_kernel::storage::MemStorage;
use holdup_kernel::units::Millis;
use holdup_kernel::{Error, Scalar};
use serde::{de::DeserializeOwned, Serialize};

use crate::plant::{OutletKind, Plant, ScalarKind, Signal};
use crate::replay::assemble::{self, Sensors, LAB_SLOTS};
use crate::to_kernel::{I, O, R};

/// The link the host drives: the replay's sensor type.
pub type HostLink<S, const N: usize, const D: usize> = Link<S, N, R, O, I, D, LAB_SLOTS>;

/// Temperature used to start the balance when the plant gives none and
/// its temperature is a tag: 25 °C (the PLC's first reading replaces it at
/// the first tick).
pub const DEFAULT_START_TEMPERATURE: f64 = 298.15;

/// A link on its own clock with no watchdog and no checkpoints (unit 1,
/// high word first): for a driver that ticks it itself.
pub fn free_running() -> LinkSpec {
    LinkSpec {
        unit_id: 1,
        word_order: holdup_kernel::modbus::WordOrder::HighFirst,
        clock: holdup_kernel::modbus::Clock::Free,
        stale_after_ms: 0,
        checkpoints: false,
    }
}

/// The plant's sizes, as the map sees them.
pub fn dims(plant: &Plant) -> Dims {
    let small = |n: usize| u8::try_from(n).unwrap_or(u8::MAX);
    Dims {
        species: small(plant.species.len()),
        inlets: small(plant.inlets.len()),
        outlets: small(plant.outlets.len()),
        biases: small(plant.estimator.as_ref().map_or(0, |e| e.bias_meters.len())),
    }
}

/// The plant's register map.
///
/// Errors: [`Error::LinkMapTooLarge`] for a plant too large for one table.
pub fn map(plant: &Plant) -> Result<RegisterMap, Error> {
    RegisterMap::new(dims(plant))
}

/// The temperature the balance starts at: the plant's initial temperature,
/// or its constant temperature, or [`DEFAULT_START_TEMPERATURE`].
pub fn start_temperature(plant: &Plant) -> f64 {
    plant
        .initial
        .temperature
        .unwrap_or(match plant.temperature {
            Signal::Constant(t) => t,
            Signal::Tag { .. } => DEFAULT_START_TEMPERATURE,
        })
}

/// The plant's sensor behind its map, the constants written.
///
/// Errors: the kernel's, for a configuration it refuses (in practice
/// caught by the config loader) or a map too large.
pub fn build<S: Scalar, const N: usize, const D: usize>(
    plant: &Plant,
    spec: LinkSpec,
) -> Result<HostLink<S, N, D>, Error> {
    let Sensors { main, .. } = assemble::sensors::<S, N, D>(plant, start_temperature(plant))?;
    let mut link = Link::with_dims(main, spec, dims(plant))?;
    let m = *link.map();
    let order = spec.word_order;
    let mut preset = |address: u16, signal: &Signal| -> Result<(), Error> {
        if let Signal::Constant(v) = signal {
            link.write_holding(address, &order.split((*v as f32).to_bits()))?;
        }
        Ok(())
    };
    for (k, inlet) in (0u8..).zip(plant.inlets.iter()) {
        preset(m.inlet_flow_address(k), &inlet.flow)?;
        for (i, feed) in (0u8..).zip(inlet.feed.iter()) {
            preset(m.feed_address(k, i), feed)?;
        }
    }
    for (k, outlet) in (0u8..).zip(plant.outlets.iter()) {
        if let OutletKind::Measured(signal) = &outlet.kind {
            preset(m.outlet_flow_address(k), signal)?;
        }
    }
    preset(m.temperature_address(), &plant.temperature)?;
    Ok(link)
}

/// One checkpoint slot of a host link's checkpoint file: room for the
/// largest sensor the host builds (8 species, 8 lab slots) several times
/// over.
pub const CHECKPOINT_SLOT: u32 = 32 * 1024;

/// The size of a checkpoint file: two slots (the kernel writes the older
/// one, so a save cut short leaves the newer intact).
pub const CHECKPOINT_IMAGE: usize = 2 * CHECKPOINT_SLOT as usize;

const CHECKPOINTS: Checkpoints = Checkpoints::new(0, CHECKPOINT_SLOT);

/// What one tick of a [`PlantLink`] did, without the scalar type.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Ticked {
    /// The inputs were stale (watchdog).
    pub stale: bool,
    /// The PLC asked for a checkpoint.
    pub save_checkpoint: bool,
    /// A lab event was applied before the tick, with this outcome.
    pub lab: Option<LabOutcome>,
}

/// A plant's link whatever its scalar type and species count: what the
/// server and the client hold. Everything it reports is in its registers.
pub trait PlantLink: Send {
    /// See [`Link::handle`].
    fn handle(&mut self, request: &[u8], framing: Framing, response: &mut Response) -> Served;
    /// See [`Link::tick`].
    fn tick(&mut self, now: Millis) -> Ticked;
    /// See [`Link::sequence_pending`].
    fn sequence_pending(&self) -> bool;
    /// See [`Link::write_holding`].
    fn write_holding(&mut self, address: u16, values: &[u16]) -> Result<(), Error>;
    /// See [`Link::holding_registers`].
    fn holding_registers(&self) -> &[u16];
    /// See [`Link::input_registers`].
    fn input_registers(&self) -> &[u16];
    /// See [`Link::map`].
    fn map(&self) -> &RegisterMap;
    /// See [`Link::spec`].
    fn spec(&self) -> &LinkSpec;
    /// See [`Link::counters`].
    fn counters(&self) -> LinkCounters;
    /// See [`Link::checkpoint_saved`].
    fn checkpoint_saved(&mut self, ok: bool);
    /// The sensor's tick, ms.
    fn tick_ms(&self) -> u32;
    /// Save the sensor's whole state into `image` (a checkpoint file's
    /// [`CHECKPOINT_IMAGE`] bytes, as last written: the older slot is
    /// overwritten).
    fn save_state(&self, image: &mut [u8]) -> Result<SlotInfo, Error>;
    /// Restore the newest valid state of `image` into the sensor (saved by
    /// a link of the same plant configuration); on error nothing changes.
    fn restore_state(&mut self, image: &mut [u8]) -> Result<RestoreReport, Error>;
}

impl<S, const N: usize, const D: usize> PlantLink for HostLink<S, N, D>
where
    S: Scalar + Send + Serialize + DeserializeOwned,
{
    fn handle(&mut self, request: &[u8], framing: Framing, response: &mut Response) -> Served {
        Link::handle(self, request, framing, response)
    }
    fn tick(&mut self, now: Millis) -> Ticked {
        let t = Link::tick(self, now);
        Ticked {
            stale: t.stale,
            save_checkpoint: t.save_checkpoint,
            lab: t.lab,
        }
    }
    fn sequence_pending(&self) -> bool {
        Link::sequence_pending(self)
    }
    fn write_holding(&mut self, address: u16, values: &[u16]) -> Result<(), Error> {
        Link::write_holding(self, address, values)
    }
    fn holding_registers(&self) -> &[u16] {
        Link::holding_registers(self)
    }
    fn input_registers(&self) -> &[u16] {
        Link::input_registers(self)
    }
    fn map(&self) -> &RegisterMap {
        Link::map(self)
    }
    fn spec(&self) -> &LinkSpec {
        Link::spec(self)
    }
    fn counters(&self) -> LinkCounters {
        Link::counters(self)
    }
    fn checkpoint_saved(&mut self, ok: bool) {
        Link::checkpoint_saved(self, ok)
    }
    fn tick_ms(&self) -> u32 {
        self.sensor().vessel().model().tick_ms()
    }
    fn save_state(&self, image: &mut [u8]) -> Result<SlotInfo, Error> {
        let mut scratch = vec![0u8; CHECKPOINT_SLOT as usize];
        CHECKPOINTS.save(self.sensor(), &mut MemStorage::new(image), &mut scratch)
    }
    fn restore_state(&mut self, image: &mut [u8]) -> Result<RestoreReport, Error> {
        let mut scratch = vec![0u8; CHECKPOINT_SLOT as usize];
        CHECKPOINTS.restore_into(self.sensor_mut(), &mut MemStorage::new(image), &mut scratch)
    }
}

/// The plant's link at the plant's scalar type and species count (the
/// replay's instances: `D = N + 5`, four bias slots).
///
/// Errors: see [`build`].
pub fn build_for(plant: &Plant, spec: LinkSpec) -> Result<Box<dyn PlantLink>, Error> {
    fn boxed<S, const N: usize, const D: usize>(
        plant: &Plant,
        spec: LinkSpec,
    ) -> Result<Box<dyn PlantLink>, Error>
    where
        S: Scalar + Send + Serialize + DeserializeOwned + 'static,
    {
        Ok(Box::new(build::<S, N, D>(plant, spec)?))
    }
    macro_rules! by_n {
        ($s:ty) => {
            match plant.species.len() {
                1 => boxed::<$s, 1, 6>(plant, spec),
                2 => boxed::<$s, 2, 7>(plant, spec),
                3 => boxed::<$s, 3, 8>(plant, spec),
                4 => boxed::<$s, 4, 9>(plant, spec),
                5 => boxed::<$s, 5, 10>(plant, spec),
                6 => boxed::<$s, 6, 11>(plant, spec),
                7 => boxed::<$s, 7, 12>(plant, spec),
                _ => boxed::<$s, 8, 13>(plant, spec),
            }
        };
    }
    match plant.scalar {
        ScalarKind::F32 => by_n!(f32),
        ScalarKind::F64 => by_n!(f64),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use holdup_kernel::modbus::{Clock, WordOrder};

    fn demo() -> Plant {
        let path = concat!(env!("CARGO_MANIFEST_DIR"), "/../fixtures/demo/plant.toml");
        crate::config::load(std::path::Path::new(path)).unwrap()
    }

    fn spec() -> LinkSpec {
        LinkSpec {
            unit_id: 1,
            word_order: WordOrder::HighFirst,
            clock: Clock::Sequence,
            stale_after_ms: 10_000,
            checkpoints: false,
        }
    }

    #[test]
    fn a_saved_state_restored_into_a_new_link_goes_on_bit_for_bit() {
        let plant = demo();
        let spec = LinkSpec {
            checkpoints: true,
            ..spec()
        };
        let mut a = build_for(&plant, spec).unwrap();
        let m = *a.map();
        let inputs = |l: &mut Box<dyn PlantLink>, seq: u16, level: f64| {
            for (addr, x) in [
                (m.inlet_flow_address(0), 0.3 / 3600.0),
                (m.inlet_flow_address(1), 0.3 / 3600.0),
                (m.outlet_flow_address(0), 0.6 / 3600.0),
                (m.temperature_address(), 298.15),
                (m.level_address(), level),
            ] {
                let w = WordOrder::HighFirst.split((x as f32).to_bits());
                l.write_holding(addr, &w).unwrap();
            }
            l.write_holding(0, &[seq]).unwrap();
        };
        for n in 0..30u16 {
            inputs(&mut a, n + 1, 1.5 + 1e-4 * f64::from(n % 7));
            a.tick(u64::from(n) * 1000);
        }
        let mut image = vec![0u8; CHECKPOINT_IMAGE];
        let first = a.save_state(&mut image).unwrap();
        let second = a.save_state(&mut image).unwrap();
        assert_ne!(first.slot, second.slot, "the older slot is overwritten");
        let mut b = build_for(&plant, spec).unwrap();
        let report = b.restore_state(&mut image).unwrap();
        assert_eq!(
            (report.slot, report.sequence),
            (second.slot, second.sequence)
        );
        for n in 30..40u16 {
            inputs(&mut a, n + 1, 1.5);
            inputs(&mut b, n + 1, 1.5);
            a.tick(u64::from(n) * 1000);
            b.tick(u64::from(n) * 1000);
        }
        // The outputs but the tick count and heartbeat (b ran 10 ticks).
        let outputs = |l: &dyn PlantLink| l.input_registers()[6..].to_vec();
        assert_eq!(outputs(a.as_ref()), outputs(b.as_ref()));
        // Another plant's checkpoint is refused, and nothing changes.
        let mut other = plant.clone();
        other.initial.volume *= 1.5;
        other.tick_ms = 2000;
        let mut c = build_for(&other, spec).unwrap();
        let before = c.input_registers().to_vec();
        assert!(c.restore_state(&mut image).is_err());
        assert_eq!(c.input_registers(), &before[..]);
    }

    #[test]
    fn the_demo_plant_has_its_own_sizes_and_its_constants_written() {
        let plant = demo();
        let mut link = build_for(&plant, spec()).unwrap();
        let m = *link.map();
        assert_eq!(
            m.dims(),
            Dims {
                species: 3,
                inlets: 2,
                outlets: 1,
                biases: 1
            }
        );
        let f32_at = |regs: &[u16], a: u16| {
            let a = usize::from(a);
            f32::from_bits(WordOrder::HighFirst.join([regs[a], regs[a + 1]]))
        };
        // 0.1 mol/L of NaOH in the caustic feed, none of the others.
        assert_eq!(
            f32_at(link.holding_registers(), m.feed_address(0, 0)),
            100.0
        );
        assert_eq!(f32_at(link.holding_registers(), m.feed_address(0, 1)), 0.0);
        // The measured inputs read NaN until written.
        assert!(f32_at(link.holding_registers(), m.inlet_flow_address(0)).is_nan());
        for (a, x) in [
            (m.inlet_flow_address(0), 0.3 / 3600.0),
            (m.inlet_flow_address(1), 0.3 / 3600.0),
            (m.outlet_flow_address(0), 0.6 / 3600.0),
            (m.temperature_address(), 298.15),
            (m.level_address(), 1.5),
        ] {
            let w = WordOrder::HighFirst.split((x as f32).to_bits());
            link.write_holding(a, &w).unwrap();
        }
        link.write_holding(0, &[1]).unwrap();
        assert!(link.sequence_pending());
        let t = link.tick(0);
        assert!(!t.stale);
        let regs = link.input_registers();
        assert_eq!(regs[2..4], [0, 1], "one tick");
        let holdup = f32_at(regs, m.holdup_address());
        assert!((holdup - 2.5).abs() < 0.01, "{holdup}");
    }
}
