//! Line series and scatter markers in constant memory: a [`Series`] keeps
//! the first, minimum, maximum and last sample of each run in at most
//! `max_buckets` buckets, merging pairs as it fills; [`Markers`] thin to a
//! doubling stride (see the module docs of [`super`]).

use super::{Color, MAX_BUCKETS, MAX_MARKERS};

/// A kept sample. `brk`: the line does not join the previous kept point to
/// this one (there was a gap between them).
#[derive(Clone, Copy, Debug)]
pub(super) struct Pt {
    pub(super) x: f64,
    pub(super) y: f64,
    pub(super) brk: bool,
}

/// A run of `count` consecutive finite samples, of which at most four are
/// kept: first, min, max, last, in arrival order.
#[derive(Clone, Copy, Debug)]
pub(super) struct Bucket {
    pub(super) pts: [Pt; 4],
    pub(super) n: u8,
    pub(super) count: u64,
}

impl Bucket {
    pub(super) fn single(p: Pt) -> Self {
        Bucket {
            pts: [p; 4],
            n: 1,
            count: 1,
        }
    }

    pub(super) fn points(&self) -> &[Pt] {
        &self.pts[..usize::from(self.n)]
    }

    /// Appends the run `other` (which follows this one) and keeps first, min,
    /// max and last of the union. A break on any dropped point moves to the
    /// next kept point, so gaps survive.
    pub(super) fn absorb(&mut self, other: &Bucket) {
        let mut cand = [self.pts[0]; 8];
        let mut m = 0;
        for p in self.points().iter().chain(other.points()) {
            cand[m] = *p;
            m += 1;
        }
        let cand = &cand[..m];
        let (mut lo, mut hi) = (0, 0);
        for (i, p) in cand.iter().enumerate() {
            if p.y < cand[lo].y {
                lo = i;
            }
            if p.y > cand[hi].y {
                hi = i;
            }
        }
        let mut keep = [false; 8];
        keep[0] = true;
        keep[m - 1] = true;
        keep[lo] = true;
        keep[hi] = true;
        let mut out = [cand[0]; 4];
        let mut n = 0;
        let mut brk = false;
        for (i, p) in cand.iter().enumerate() {
            brk |= p.brk;
            if keep[i] {
                out[n] = Pt { brk, ..*p };
                n += 1;
                brk = false;
            }
        }
        self.pts = out;
        self.n = n as u8;
        self.count = self.count.saturating_add(other.count);
    }
}

/// A named line with min/max decimation (see the module docs for the bound).
#[derive(Clone, Debug)]
pub struct Series {
    pub(super) name: String,
    /// The legend text when the ±1σ band is drawn.
    pub(super) band_name: String,
    pub(super) color: Color,
    /// `y + σ` and `y − σ`, pushed in step with the line (see
    /// [`Series::with_sigma_band`]).
    pub(super) sigma: Option<Box<[Series; 2]>>,
    pub(super) buckets: Vec<Bucket>,
    pub(super) max_buckets: usize,
    pub(super) per_bucket: u64,
    pub(super) pushed: u64,
    pub(super) pending_break: bool,
}

impl Series {
    /// A series with the default bound of [`MAX_BUCKETS`] buckets.
    pub fn new(name: &str, color: Color) -> Self {
        Self::with_max_buckets(name, color, MAX_BUCKETS)
    }

    /// A series that keeps at most `max_buckets` buckets (at least 2), i.e.
    /// at most `4 × max_buckets` points.
    pub fn with_max_buckets(name: &str, color: Color, max_buckets: usize) -> Self {
        Series {
            name: name.to_owned(),
            band_name: format!("{name} ± 1σ"),
            color,
            sigma: None,
            buckets: Vec::new(),
            max_buckets: max_buckets.max(2),
            per_bucket: 1,
            pushed: 0,
            pending_break: false,
        }
    }

    /// The same series with a shaded ±1σ band, fed by
    /// [`Series::push_with_sigma`]; the band is bounded like the line.
    pub fn with_sigma_band(mut self) -> Self {
        let edge = Series::with_max_buckets("", self.color, self.max_buckets);
        self.sigma = Some(Box::new([edge.clone(), edge]));
        self
    }

    /// Adds a sample with its 1σ: the line as [`Series::push`], and the band
    /// (if the series has one) from `y − σ` to `y + σ`. A non-finite or
    /// negative σ leaves a gap in the band, not in the line.
    pub fn push_with_sigma(&mut self, x: f64, y: f64, sigma: f64) {
        self.push(x, y);
        if let Some(edges) = self.sigma.as_deref_mut() {
            let (hi, lo) = (y + sigma, y - sigma);
            let ok = sigma >= 0.0 && hi.is_finite() && lo.is_finite();
            let (hi, lo) = if ok { (hi, lo) } else { (f64::NAN, f64::NAN) };
            edges[0].push(x, hi);
            edges[1].push(x, lo);
        }
    }

    /// Points kept for the ±1σ band's upper edge (0 without a band).
    pub fn sigma_kept(&self) -> usize {
        self.sigma.as_deref().map_or(0, |e| e[0].kept())
    }

    /// Adds a sample. A non-finite `x` or `y` is a gap: the line is broken
    /// there.
    pub fn push(&mut self, x: f64, y: f64) {
        self.pushed = self.pushed.saturating_add(1);
        if !(x.is_finite() && y.is_finite()) {
            self.pending_break = true;
            return;
        }
        let b = Bucket::single(Pt {
            x,
            y,
            brk: std::mem::take(&mut self.pending_break),
        });
        if !self.last_has_room() && self.buckets.len() >= self.max_buckets {
            self.compact();
        }
        match self.buckets.last_mut() {
            Some(last) if last.count < self.per_bucket => last.absorb(&b),
            _ => self.buckets.push(b),
        }
    }

    pub(super) fn last_has_room(&self) -> bool {
        self.buckets
            .last()
            .is_some_and(|l| l.count < self.per_bucket)
    }

    /// Merges adjacent buckets pairwise: half the buckets, twice the run.
    pub(super) fn compact(&mut self) {
        let n = self.buckets.len();
        let half = n.div_ceil(2);
        for i in 0..half {
            let mut b = self.buckets[2 * i];
            if 2 * i + 1 < n {
                let next = self.buckets[2 * i + 1];
                b.absorb(&next);
            }
            self.buckets[i] = b;
        }
        self.buckets.truncate(half);
        self.per_bucket = self.per_bucket.saturating_mul(2);
    }

    /// Number of samples pushed, gaps included.
    pub fn len(&self) -> usize {
        usize::try_from(self.pushed).unwrap_or(usize::MAX)
    }

    /// True if nothing was pushed.
    pub fn is_empty(&self) -> bool {
        self.pushed == 0
    }

    /// Number of points kept for drawing (at most `4 × max_buckets`).
    pub fn kept(&self) -> usize {
        self.buckets.iter().map(|b| usize::from(b.n)).sum()
    }

    /// Number of buckets in use (at most `max_buckets`).
    pub fn buckets(&self) -> usize {
        self.buckets.len()
    }

    /// The legend name.
    pub fn name(&self) -> &str {
        &self.name
    }

    pub(super) fn points(&self) -> impl Iterator<Item = Pt> + '_ {
        self.buckets.iter().flat_map(|b| b.points().iter().copied())
    }

    /// The kept points of both edges of the ±1σ band (none without one).
    pub(super) fn sigma_points(&self) -> impl Iterator<Item = Pt> + '_ {
        self.sigma
            .as_deref()
            .into_iter()
            .flat_map(|e| e.iter().flat_map(|s| s.points()))
    }

    /// The band's unbroken runs: upper and lower edge points of each.
    pub(super) fn sigma_runs(&self) -> Vec<(Vec<Pt>, Vec<Pt>)> {
        let Some(e) = self.sigma.as_deref() else {
            return Vec::new();
        };
        let runs = |s: &Series| {
            let mut out: Vec<Vec<Pt>> = Vec::new();
            for p in s.points() {
                if p.brk || out.is_empty() {
                    out.push(Vec::new());
                }
                if let Some(last) = out.last_mut() {
                    last.push(p);
                }
            }
            out
        };
        runs(&e[0]).into_iter().zip(runs(&e[1])).collect()
    }
}

/// Named scatter points, e.g. lab results, drawn as open circles labelled
/// with their value (labels are left out when a panel shows more than 40).
#[derive(Clone, Debug)]
pub struct Markers {
    pub(super) name: String,
    pub(super) color: Color,
    pub(super) pts: Vec<(f64, f64)>,
    pub(super) stride: u64,
    pub(super) seen: u64,
}

impl Markers {
    /// Empty set of markers.
    pub fn new(name: &str, color: Color) -> Self {
        Markers {
            name: name.to_owned(),
            color,
            pts: Vec::new(),
            stride: 1,
            seen: 0,
        }
    }

    /// Adds a point; a non-finite coordinate is ignored (no result).
    pub fn push(&mut self, x: f64, y: f64) {
        if !(x.is_finite() && y.is_finite()) {
            return;
        }
        let i = self.seen;
        self.seen = self.seen.saturating_add(1);
        if i % self.stride != 0 {
            return;
        }
        self.pts.push((x, y));
        if self.pts.len() > MAX_MARKERS {
            // Kept points are samples 0, s, 2s, ...; keep 0, 2s, 4s, ...
            let mut k = 0usize;
            self.pts.retain(|_| {
                k += 1;
                k % 2 == 1
            });
            self.stride = self.stride.saturating_mul(2);
        }
    }

    /// Number of finite points pushed.
    pub fn len(&self) -> usize {
        usize::try_from(self.seen).unwrap_or(usize::MAX)
    }

    /// True if no finite point was pushed.
    pub fn is_empty(&self) -> bool {
        self.seen == 0
    }

    /// Number of points kept for drawing (at most [`MAX_MARKERS`]).
    pub fn kept(&self) -> usize {
        self.pts.len()
    }
}
