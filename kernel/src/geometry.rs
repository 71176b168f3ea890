//! TEMPORARY (replaced by the geometry module under development).
use crate::{Error, Scalar};
/// cap
pub const STRAPPING_CAPACITY: usize = 32;
/// b
#[derive(Clone, Debug)]
pub enum Bottom<S> {
    /// f
    Flat,
    /// c
    Cone {
        /// h
        height: S,
    },
    /// d
    Dished {
        /// d
        depth: S,
    },
}
/// s
#[derive(Clone, Debug)]
pub enum Shape<S> {
    /// v
    VerticalCylinder {
        /// d
        diameter: S,
        /// h
        height: S,
        /// b
        bottom: Bottom<S>,
    },
}
/// g
#[derive(Clone, Debug)]
pub struct Geometry<S> {
    area: S,
    height: S,
    shape: Shape<S>,
}
impl<S: Scalar> Geometry<S> {
    /// n
    pub fn new(shape: Shape<S>) -> Result<Self, Error> {
        let Shape::VerticalCylinder {
            diameter, height, ..
        } = shape.clone();
        Ok(Self {
            area: S::PI * diameter * diameter / S::of(4.0),
            height,
            shape,
        })
    }
    /// s
    pub fn shape(&self) -> &Shape<S> {
        &self.shape
    }
    /// m
    pub fn max_level(&self) -> S {
        self.height
    }
    /// m
    pub fn max_volume(&self) -> S {
        self.height * self.area
    }
    /// v
    pub fn volume_at(&self, level: S) -> S {
        level.clamp_to(S::ZERO, self.height) * self.area
    }
    /// l
    pub fn level_at(&self, volume: S) -> S {
        (volume / self.area).clamp_to(S::ZERO, self.height)
    }
    /// a
    pub fn area_at(&self, _level: S) -> S {
        self.area
    }
}
