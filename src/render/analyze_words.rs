//! The notes of an analysis in words.

use super::num;
use crate::analyze::{LostUnit, Note};

/// The advice that goes with a negative variance component estimate.
pub const NEGATIVE_ADVICE: &str = "a negative estimate says the variance is small next to its sampling error; common practice is to report it as zero and to consider a model without the term (pooling its mean square into its error term), a choice best made with a statistician";

fn pairs(at: &[(String, String)]) -> String {
    at.iter()
        .map(|(f, l)| format!("{f} = {l}"))
        .collect::<Vec<_>>()
        .join(", ")
}

fn lost_unit(u: &LostUnit) -> String {
    let within = if u.within.is_empty() {
        String::new()
    } else {
        format!(" within {}", pairs(&u.within))
    };
    format!(
        "{}{within}: {} of its {} levels observed ({})",
        u.factor,
        u.observed.len(),
        u.levels,
        u.observed.join(", ")
    )
}

/// One note in words.
pub fn note(n: &Note) -> String {
    match n {
        Note::MissingResponses { lines } => {
            const SHOWN: usize = 10;
            let mut shown: Vec<String> = lines.iter().take(SHOWN).map(|l| l.to_string()).collect();
            if lines.len() > SHOWN {
                shown.push("...".into());
            }
            let one = lines.len() == 1;
            format!(
                "{} {} no response value and {} left out (line{} {})",
                lines.len(),
                if one { "row has" } else { "rows have" },
                if one { "is" } else { "are" },
                if one { "" } else { "s" },
                shown.join(", ")
            )
        }
        Note::FullDataForRemovals { removals } => format!(
            "the layout removes {removals} {} but the data hold every observation of the full layout: they are analysed as the balanced data they are",
            if *removals == 1 {
                "cell or observation"
            } else {
                "cells or observations"
            }
        ),
        Note::RestrictedAsUnrestricted => "the layout's restricted convention is defined for balanced data only; these unbalanced data are analysed under the unrestricted model".into(),
        Note::LostUnits { units, more } => {
            let mut text = format!(
                "units with no observation at all: {}",
                units.iter().map(lost_unit).collect::<Vec<_>>().join("; ")
            );
            if *more > 0 {
                text.push_str(&format!("; and {more} more"));
            }
            text
        }
        Note::ExtraObservations { at } => format!(
            "the data hold observations the layout file removes (the first at {}): they are analysed as the data are",
            pairs(at)
        ),
        Note::NoQuasiF { term, denominator } => format!(
            "{term}: the combined denominator is {} for these data (a combination of mean squares with negative weights), so there is no quasi-F; the terms it subtracts are large next to those it adds",
            num(*denominator)
        ),
        Note::ZeroErrorMeanSquare { term } => format!(
            "{term}: its error term's mean square is zero for these data, so there is no F"
        ),
        Note::ApproximateTests => "with unbalanced data the mean squares are not independent scaled chi-squares, so a test over anything but the residual is approximate even when its error term matches exactly: read its p as a guide".into(),
        Note::NegativeComponents { terms } => format!(
            "negative variance component estimate for {}: {NEGATIVE_ADVICE}",
            terms.join(", ")
        ),
        Note::NotEstimable { terms } => format!(
            "not estimable from these mean squares: {} (a term with 0 df, or one whose expected mean square needs such a term)",
            terms.join(", ")
        ),
        Note::RawMeans => "the means are raw means of the observations present; with unequal counts they are not least-squares (adjusted) means, so compare them with care".into(),
    }
}

/// A simulation's note in words.
pub fn simulation_note(n: &crate::simulate::SimulationNote) -> String {
    use crate::layout::SumsOfSquares;
    use crate::simulate::SimulationNote;
    match n {
        SimulationNote::NoVariance { terms } => format!(
            "simulated with no variance, having no [sd] value: {}",
            terms.join(", ")
        ),
        SimulationNote::NoEffect { terms } => format!(
            "simulated with no effect, having no [effect]: {}",
            terms.join(", ")
        ),
        SimulationNote::Unbalanced => "unbalanced layout: each data set is drawn over the full layout and the removed observations are dropped; expected mean squares are Hartley's (1967) synthesis coefficients times the planning variances (the squared [sd] values), plus the fixed effects' part computed exactly for the simulated effect pattern (μ'Aμ / df). In an unbalanced layout mean squares are not scaled chi-squares in general, so F and quasi-F ratios, Satterthwaite df and the analytic power (of random terms too) are approximations; the simulated rates show how close they are here".into(),
        SimulationNote::PatternPower { terms } => format!(
            "the analytic power of a fixed term is for the simulated effect pattern (noncentrality SS of the noise-free means / E(denominator)); `emsplan check` averages over effect patterns of the planned size: {}",
            terms
                .iter()
                .map(|(t, theirs, mine)| format!("{t} {theirs:.3} (here {mine:.3})"))
                .collect::<Vec<_>>()
                .join(", ")
        ),
        SimulationNote::NullCarries {
            term,
            sums_of_squares,
            null_rate,
        } => format!(
            "under its null, the mean square of {term} still carries other fixed terms' effects ({}), so its analytic null rate at the simulated pattern is {null_rate:.3}, not alpha",
            match sums_of_squares {
                SumsOfSquares::Sequential =>
                    "sequential sums of squares adjust it only for the terms fitted before it",
                SumsOfSquares::Type3 => "its type III hypothesis involves them",
            }
        ),
    }
}
