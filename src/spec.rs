//! The layout file exactly as the user wrote it: plain serde structs, unknown keys refused.
//!
//! Nothing here is validated beyond what serde and TOML check; `layout::Layout::from_spec`
//! turns a `Spec` into a model that cannot be invalid.

use std::collections::BTreeMap;
use std::path::Path;

use serde::Deserialize;
use toml::Spanned;

use crate::error::Error;

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Spec {
    pub alpha: Option<Spanned<f64>>,
    pub layout: Option<Spanned<LayoutSpec>>,
    #[serde(default)]
    pub factor: Vec<Spanned<FactorSpec>>,
    /// `[[unit]]`: the physical units of the experiment (blocks, chambers, plots,
    /// animals), each nested in the units it divides.
    #[serde(default)]
    pub unit: Vec<Spanned<UnitSpec>>,
    /// `[[treatment]]`: what is compared, each randomised to one unit.
    #[serde(default)]
    pub treatment: Vec<Spanned<TreatmentSpec>>,
    /// `[sd]`: the standard deviations guessed for the random terms and the residual,
    /// for planning. A file may still call the table by its old name, `[prior]`.
    pub sd: Option<Spanned<BTreeMap<String, Spanned<f64>>>>,
    /// The old name of `[sd]`, as read; `parse` moves it into `sd` and leaves a note.
    #[serde(rename = "prior")]
    old_sd: Option<Spanned<BTreeMap<String, Spanned<f64>>>>,
    pub effect: Option<BTreeMap<String, Spanned<EffectSpec>>>,
    pub cost: Option<CostSpec>,
    pub search: Option<SearchSpec>,
    /// What the reader should know about how the file was read (an old table name);
    /// not an error, and the run is the same without it.
    #[serde(skip)]
    pub notes: Vec<Note>,
}

/// A remark about the file as written, with its place: `layout.toml line 12: ...`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Note {
    pub file: Option<String>,
    pub line: Option<usize>,
    pub message: String,
}

impl std::fmt::Display for Note {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "{}{}",
            crate::error::where_(&self.file, &self.line),
            self.message
        )
    }
}

#[derive(Debug, Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LayoutSpec {
    pub name: Option<String>,
    /// Observations per cell of a file of `[[factor]]` tables; a file of units says
    /// how many units of each kind instead.
    pub replicates: Option<Spanned<i64>>,
    /// With units: whether units and treatments are additive (interactions of a unit
    /// with treatments randomised to smaller units assumed absent and pooled into the
    /// stratum error), the default, or not (those interactions kept as random terms).
    pub additive: Option<Spanned<bool>>,
    /// The terms that matter: they get advice and repairs. By default every term of a
    /// file of factors, and the treatment terms of a file of units.
    #[serde(default)]
    pub of_interest: Vec<Spanned<String>>,
    pub convention: Option<Spanned<ConventionSpec>>,
    #[serde(default)]
    pub omit: Vec<Spanned<String>>,
    /// Cells missing from the full layout: each table names factors (and `replicate`) by
    /// 1-based level index within their nests; unnamed factors range over every level.
    #[serde(default)]
    pub remove: Vec<Spanned<BTreeMap<String, Spanned<i64>>>>,
    /// Which sums of squares the expected mean squares of an unbalanced layout are of.
    pub sums_of_squares: Option<Spanned<SumsOfSquaresSpec>>,
}

#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq)]
pub enum SumsOfSquaresSpec {
    #[serde(rename = "sequential")]
    Sequential,
    #[serde(rename = "type3")]
    Type3,
}

#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum ConventionSpec {
    Restricted,
    Unrestricted,
}

#[derive(Debug, Clone, Copy, Deserialize, PartialEq, Eq)]
#[serde(rename_all = "lowercase")]
pub enum KindSpec {
    Fixed,
    Random,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct FactorSpec {
    pub name: Spanned<String>,
    pub kind: Spanned<KindSpec>,
    pub levels: Spanned<i64>,
    #[serde(default)]
    pub within: Vec<Spanned<String>>,
    pub population: Option<Spanned<i64>>,
}

/// One name or a list of names.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum Names {
    One(String),
    Many(Vec<String>),
}

impl Names {
    pub fn list(&self) -> Vec<&str> {
        match self {
            Names::One(n) => vec![n.as_str()],
            Names::Many(v) => v.iter().map(String::as_str).collect(),
        }
    }
}

/// A kind of unit: how many of them in each unit it is `within` (in all, at the top).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct UnitSpec {
    pub name: Spanned<String>,
    pub count: Spanned<i64>,
    pub within: Option<Spanned<Names>>,
}

/// A treatment factor and the unit its levels are randomised to.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct TreatmentSpec {
    pub name: Spanned<String>,
    pub kind: Option<Spanned<KindSpec>>,
    pub levels: Spanned<i64>,
    pub randomised_to: Spanned<Names>,
    pub population: Option<Spanned<i64>>,
}

/// A smallest effect worth detecting: a bare number is the root mean square of the
/// term's effects; `{ range = D }` is the least favourable configuration of a main effect.
#[derive(Debug, Clone, Deserialize)]
#[serde(untagged)]
pub enum EffectSpec {
    RootMeanSquare(f64),
    Range(RangeSpec),
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct RangeSpec {
    pub range: f64,
}

#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct CostSpec {
    pub overhead: Option<Spanned<f64>>,
    #[serde(default)]
    pub per_unit: BTreeMap<String, Spanned<f64>>,
}

/// The design search's goal and space (a problem file is a layout file with this table).
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SearchSpec {
    pub budget: Option<Spanned<f64>>,
    #[serde(default)]
    pub must_test: Vec<Spanned<String>>,
    pub min_df: Option<Spanned<f64>>,
    pub exact_only: Option<bool>,
    pub target_power: Option<Spanned<f64>>,
    /// Inclusive ranges of level counts by factor name, and `replicates`.
    #[serde(default)]
    pub levels: BTreeMap<String, Spanned<Vec<i64>>>,
    #[serde(default)]
    pub choice: Vec<Spanned<ChoiceSpec>>,
    /// `[[search.placement]]`: for a treatment, the units it may be randomised to.
    #[serde(default)]
    pub placement: Vec<Spanned<PlacementSpec>>,
    /// Units that the layout may do without (their members merge into the unit above).
    #[serde(default)]
    pub optional_units: Vec<Spanned<String>>,
    /// `[[search.limit]]`: at most so many units, in all or per member of a larger unit.
    #[serde(default)]
    pub limit: Vec<Spanned<LimitSpec>>,
}

/// The units one treatment may be randomised to.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct PlacementSpec {
    pub treatment: Spanned<String>,
    pub randomised_to: Spanned<Vec<String>>,
}

/// A capacity: at most `at_most` units of one kind, in all or per member of `per`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct LimitSpec {
    pub unit: Spanned<String>,
    pub at_most: Spanned<i64>,
    pub per: Option<Spanned<String>>,
}

/// Structural alternatives for one factor: nesting choices, or an optional layer.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct ChoiceSpec {
    pub factor: Spanned<String>,
    pub within: Option<Vec<Vec<String>>>,
    pub optional: Option<bool>,
}

/// Reads and parses a layout file. The file must be UTF-8 text.
pub fn read(path: &Path) -> Result<(Spec, String), Error> {
    let bytes = std::fs::read(path).map_err(|source| Error::Io {
        path: path.display().to_string(),
        source,
    })?;
    let text = String::from_utf8(bytes).map_err(|_| Error::NotText {
        path: path.display().to_string(),
    })?;
    if text.contains('\0') {
        return Err(Error::NotText {
            path: path.display().to_string(),
        });
    }
    let mut spec = parse(&text).map_err(|e| e.in_file(path))?;
    for note in &mut spec.notes {
        note.file = Some(path.display().to_string());
    }
    Ok((spec, text))
}

/// Parses layout text; errors and notes carry the line but no file name yet.
pub fn parse(text: &str) -> Result<Spec, Error> {
    let mut spec = toml::from_str::<Spec>(text).map_err(|e| {
        let line = e.span().map(|s| line_of(text, s.start));
        Error::Syntax {
            file: None,
            line,
            message: e.message().trim().to_string(),
        }
    })?;
    if let Some(old) = spec.old_sd.take() {
        let old_line = line_of(text, old.span().start);
        if let Some(sd) = &spec.sd {
            let sd_line = line_of(text, sd.span().start);
            let (line, here, there, other_line) = if sd_line > old_line {
                (sd_line, "[sd]", "[prior]", old_line)
            } else {
                (old_line, "[prior]", "[sd]", sd_line)
            };
            return Err(Error::Syntax {
                file: None,
                line: Some(line),
                message: format!(
                    "{here} and the {there} table of line {other_line} are the same table ([prior] is the old name of [sd]): keep one, named [sd]"
                ),
            });
        }
        spec.notes.push(Note {
            file: None,
            line: Some(old_line),
            message: "[prior] is now called [sd]; the old name still works".into(),
        });
        spec.sd = Some(old);
    }
    Ok(spec)
}

/// 1-based line number of a byte offset.
pub fn line_of(text: &str, offset: usize) -> usize {
    let end = offset.min(text.len());
    text.as_bytes()[..end]
        .iter()
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}
