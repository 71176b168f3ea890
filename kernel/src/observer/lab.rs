//! Delayed lab results: a sample's information taken at its draw, its
//! result fused later at the time it was drawn (see the observer's module
//! documentation).

use super::covariance::{identity, make_positive_definite, mat_vec, symmetrize};
use super::{Observer, Update};
use crate::units::Millis;
use crate::{Error, Scalar};

/// A lab sample waiting for its result.
#[derive(Clone, Copy, Debug, PartialEq)]
#[cfg_attr(
    feature = "serde",
    derive(serde::Serialize, serde::Deserialize),
    serde(bound(
        serialize = "S: serde::Serialize",
        deserialize = "S: serde::Deserialize<'de> + Copy + Default"
    ))
)]
pub(super) struct Pending<S, const D: usize> {
    pub(super) id: u32,
    pub(super) drawn_ms: Millis,
    pub(super) predicted: S,
    /// `P_s Hᵀ` (prior at the draw).
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays"))]
    pub(super) ph: [S; D],
    /// Innovation variance `H P_s Hᵀ + r`.
    pub(super) s: S,
    #[cfg_attr(feature = "serde", serde(with = "crate::serde_arrays::matrix"))]
    pub(super) m: [[S; D]; D],
}

impl<S: Scalar, const N: usize, const R: usize, const O: usize, const D: usize, const L: usize>
    Observer<S, N, R, O, D, L>
{
    /// Remove pending sample `i`, the last one taking its place (the order
    /// of `Vec::swap_remove`), written with a swap of two distinct elements
    /// and a pop: `swap_remove` moves with `ptr::copy`, which brings the
    /// general `memmove` (1.5 KiB) into the Cortex-M4F image for this alone.
    pub(super) fn take_pending(&mut self, i: usize) -> Option<Pending<S, D>> {
        let last = self.pending.len().checked_sub(1)?;
        if i < last {
            let (head, tail) = self.pending.split_at_mut(last);
            if let (Some(a), Some(b)) = (head.get_mut(i), tail.first_mut()) {
                core::mem::swap(a, b);
            }
        } else if i > last {
            return None;
        }
        self.pending.pop()
    }

    /// Undo the covariance reduction anticipated for a pending sample that
    /// will not be fused: `P += u uᵀ/S`, `u = M P_s Hᵀ`.
    pub(super) fn release(&mut self, p: &Pending<S, D>) {
        let u = mat_vec(&p.m, &p.ph);
        for i in 0..D {
            for j in 0..D {
                self.p[i][j] += u[i] * u[j] / p.s;
            }
        }
        symmetrize(&mut self.p);
        if !make_positive_definite(&mut self.p) {
            self.counters.covariance_guarded = self.counters.covariance_guarded.saturating_add(1);
        }
    }

    /// A lab sample of `species` is drawn now, to be analysed with standard
    /// deviation `sigma` (mol/m³); its result will be given to
    /// [`Observer::lab_result`] with the same `id`. The covariance counts the
    /// analysis from now on (see the module documentation).
    ///
    /// Errors: [`Error::LabQueueFull`] when `L` samples are already pending
    /// (the sample is not recorded), [`Error::LabSampleNotObservable`] when
    /// the vessel is near empty, the species index is out of range or the
    /// sigma is not a positive number.
    pub fn lab_drawn(&mut self, id: u32, species: usize, sigma: S) -> Result<(), Error> {
        let Some((h, predicted)) = self.concentration_row(species) else {
            return Err(Error::LabSampleNotObservable);
        };
        if self.pending.is_full() {
            return Err(Error::LabQueueFull);
        }
        let r = sigma * sigma;
        let Some(Ok((_, ph, s))) = self.covariance_update(&h, r, None) else {
            return Err(Error::LabSampleNotObservable);
        };
        self.pending
            .push(Pending {
                id,
                drawn_ms: self.vessel.time_ms(),
                predicted,
                ph,
                s,
                m: identity(),
            })
            .map_err(|_| Error::LabQueueFull)
    }

    /// The result `c` (mol/m³) of the lab sample `id` has arrived: fuse it
    /// at the time it was drawn, carried to now.
    ///
    /// Errors: [`Error::LabSampleNotPending`] when no sample `id` is waiting
    /// (never drawn, already fused, or dropped after the maximum age).
    pub fn lab_result(&mut self, id: u32, c: S) -> Result<Update<S>, Error> {
        let Some(pos) = self.pending.iter().position(|p| p.id == id) else {
            return Err(Error::LabSampleNotPending);
        };
        let Some(pend) = self.take_pending(pos) else {
            return Err(Error::LabSampleNotPending);
        };
        let nu = c - pend.predicted;
        if !nu.is_finite() {
            self.release(&pend);
            self.counters.skipped = self.counters.skipped.saturating_add(1);
            return Ok(Update::Skipped);
        }
        let nis = nu * nu / pend.s;
        if !(nis <= self.spec.gate) {
            self.release(&pend);
            let out = Update::Rejected { nis };
            self.count_composition(out);
            return Ok(out);
        }
        let u = mat_vec(&pend.m, &pend.ph);
        let mut k = [S::ZERO; D];
        for (ki, ui) in k.iter_mut().zip(u.iter()) {
            *ki = *ui / pend.s;
        }
        self.apply_correction(&k, nu);
        let out = Update::Accepted { nis };
        self.count_composition(out);
        Ok(out)
    }
}
