//! The one table of shaded kinds: every fault of the log, every input the
//! conditioning did not pass as good, and every alarm has one fixed label
//! and one fixed fill, the same in every report. Legends list the kinds a
//! panel shows, in this table's order.

/// A kind of shaded window.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Shade {
    /// The log has no point of a tag for longer than its `max_age`.
    DataGap,
    /// A tag's value did not change for longer than the flat-line age.
    FlatLine,
    /// A run of empty or unreadable values of a tag.
    MissingValues,
    /// The conditioning did not pass a reading as good (rejected and held,
    /// stale, stuck or saturated).
    InputNotGood,
    /// The balance-closure alarm: more flowed out than in.
    MoreOutThanIn,
    /// The balance-closure alarm: more flowed in than out.
    MoreInThanOut,
}

impl Shade {
    /// Every kind, in legend order.
    pub const ALL: [Shade; 6] = [
        Shade::DataGap,
        Shade::FlatLine,
        Shade::MissingValues,
        Shade::InputNotGood,
        Shade::MoreOutThanIn,
        Shade::MoreInThanOut,
    ];

    /// Legend text.
    pub fn label(self) -> &'static str {
        match self {
            Shade::DataGap => "data gap in the log",
            Shade::FlatLine => "flat line in the log",
            Shade::MissingValues => "missing values in the log",
            Shade::InputNotGood => "input not good (held, stale, stuck)",
            Shade::MoreOutThanIn => "alarm: more out than in",
            Shade::MoreInThanOut => "alarm: more in than out",
        }
    }

    /// Fill colour `#rrggbb`, drawn at [`Shade::OPACITY`]. Light tints
    /// under the lines, none of them a line colour of [`super::Color`].
    pub fn fill(self) -> &'static str {
        match self {
            Shade::DataGap => "#9a9a9a",
            Shade::FlatLine => "#8fd18a",
            Shade::MissingValues => "#b99bd6",
            Shade::InputNotGood => "#f2dc5d",
            Shade::MoreOutThanIn => "#f08a5d",
            Shade::MoreInThanOut => "#7fb8e6",
        }
    }

    /// True for an alarm of the sensor (not a fault of one input).
    pub fn is_alarm(self) -> bool {
        matches!(self, Shade::MoreOutThanIn | Shade::MoreInThanOut)
    }

    /// Opacity of a shaded window.
    pub const OPACITY: &'static str = "0.4";
}
