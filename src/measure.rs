//! What a heat image or a tile pyramid colours the cells by: the report week's edits,
//! deletions, newcomer edits, highest changeset score, or edits against their expectation.
//! One place says, for each measure, how a cell's value is read from the analysis, its words
//! and units, and its colour scale, so images and tiles agree.

use std::fmt;
use std::str::FromStr;

use h3o::CellIndex;

use crate::cells::Kind;
use crate::detect::{predict, DetectConfig};
use crate::pipeline::Analysis;
use crate::render::{Colormap, HeatCell, Scale, Style};

/// A per-cell measure of the report week.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord, Default)]
pub enum Measure {
    /// Element versions edited (created, modified or deleted).
    #[default]
    Edits,
    /// Deleted objects (ways, relations, tagged nodes), as the deletion-burst detector counts.
    Deletions,
    /// Edits by mappers whose account was younger than the newcomer threshold.
    Newcomers,
    /// The highest score of any changeset that edited the cell.
    Score,
    /// Edits against their expectation: `(observed + 1) / (expected + 1)`, where the
    /// expectation is the cell's baseline (the same Gamma-Poisson model the detectors use).
    Ratio,
}

impl Measure {
    /// Every measure, in the order the report shows them.
    pub const ALL: [Self; 5] = [
        Self::Edits,
        Self::Deletions,
        Self::Newcomers,
        Self::Score,
        Self::Ratio,
    ];

    /// The name on the command line.
    #[must_use]
    pub const fn name(self) -> &'static str {
        match self {
            Self::Edits => "edits",
            Self::Deletions => "deletions",
            Self::Newcomers => "newcomers",
            Self::Score => "score",
            Self::Ratio => "ratio",
        }
    }

    /// The heat image's file name in a region folder.
    #[must_use]
    pub const fn file_name(self) -> &'static str {
        match self {
            Self::Edits => "heat.png",
            Self::Deletions => "heat-deletions.png",
            Self::Newcomers => "heat-newcomers.png",
            Self::Score => "heat-score.png",
            Self::Ratio => "heat-ratio.png",
        }
    }

    /// What is shown, for titles ("Quillhaven: deletions, 2026-W48").
    #[must_use]
    pub const fn title(self) -> &'static str {
        match self {
            Self::Edits => "edits",
            Self::Deletions => "deletions",
            Self::Newcomers => "newcomer edits",
            Self::Score => "changeset scores",
            Self::Ratio => "edits against expectation",
        }
    }

    /// The legend caption, with units.
    #[must_use]
    pub const fn legend(self) -> &'static str {
        match self {
            Self::Edits => "edits per cell in the week",
            Self::Deletions => "deleted objects per cell in the week",
            Self::Newcomers => "edits by newcomer accounts per cell in the week",
            Self::Score => "highest changeset score in the cell (0-1)",
            Self::Ratio => "edits ÷ expected edits, (observed + 1) ÷ (expected + 1), log scale",
        }
    }

    /// How values map to colours.
    #[must_use]
    pub const fn scale(self) -> Scale {
        match self {
            Self::Edits | Self::Deletions | Self::Newcomers => Scale::Log,
            Self::Score => Scale::Linear,
            Self::Ratio => Scale::Ratio,
        }
    }

    /// A fixed top of the colour scale, where the measure has one (scores end at 1).
    #[must_use]
    pub const fn value_max(self) -> Option<f64> {
        match self {
            Self::Score => Some(1.0),
            _ => None,
        }
    }

    /// The style's colour map for this measure: diverging for the ratio, else sequential.
    #[must_use]
    pub const fn colormap(self, style: &Style) -> Colormap {
        match self {
            Self::Ratio => style.maps.diverging,
            _ => style.maps.sequential,
        }
    }

    /// Whether the measure is a count that adds up over cells (for "1 842 edits" lines).
    #[must_use]
    pub const fn is_count(self) -> bool {
        matches!(self, Self::Edits | Self::Deletions | Self::Newcomers)
    }
}

impl fmt::Display for Measure {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

impl FromStr for Measure {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let wanted = s.trim();
        Self::ALL
            .into_iter()
            .find(|m| m.name().eq_ignore_ascii_case(wanted))
            .ok_or_else(|| {
                format!(
                    "unknown measure {s:?}; expected one of: {}",
                    Self::ALL.map(Self::name).join(", ")
                )
            })
    }
}

/// The report-week values of `measure` for `cells`, in their order. Counts are 0 for a cell
/// without edits that week (not drawn); the ratio is drawn for every cell with edits anywhere
/// in the analysis window, so quiet weeks show as below expectation.
#[must_use]
pub fn heat_cells(
    analysis: &Analysis,
    cells: &[CellIndex],
    measure: Measure,
    detect: &DetectConfig,
) -> Vec<HeatCell> {
    let cw = &analysis.cell_weeks;
    let report = cw.weeks - 1;
    cells
        .iter()
        .filter_map(|&cell| {
            let week = &cw.get(cell)?[report];
            #[allow(clippy::cast_precision_loss, reason = "counts are far below 2^52")]
            let value = match measure {
                Measure::Edits => week.edits as f64,
                Measure::Deletions => week.value(Kind::DeletionBurst) as f64,
                Measure::Newcomers => week.newcomer_edits as f64,
                Measure::Score => week.score_max,
                Measure::Ratio => {
                    let expected = predict(cw, cell, &|c| c.edits, detect).mean();
                    (week.edits as f64 + 1.0) / (expected + 1.0)
                }
            };
            Some(HeatCell { cell, value })
        })
        .collect()
}

#[cfg(test)]
#[allow(clippy::unwrap_used, reason = "constant test inputs")]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_files_differ() {
        for m in Measure::ALL {
            assert_eq!(m.name().parse::<Measure>().unwrap(), m);
        }
        assert!("heat".parse::<Measure>().is_err());
        let mut files: Vec<_> = Measure::ALL.iter().map(|m| m.file_name()).collect();
        files.sort_unstable();
        files.dedup();
        assert_eq!(files.len(), Measure::ALL.len());
        let style = Style::default();
        assert!(Measure::Ratio.colormap(&style).is_diverging());
        assert!(!Measure::Score.colormap(&style).is_diverging());
    }
}
