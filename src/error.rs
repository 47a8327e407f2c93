//! What kind of failure an error is: invalid input (the user can fix what they gave) or failed
//! work (hardware, I/O, a fit that did not converge). The binary maps the kind to its exit
//! code (2 or 1), so the code never depends on an error's wording.
//!
//! Each module keeps its own typed errors; [`kind`] walks an error's cause chain and lets the
//! outermost error it knows decide. Errors about the command's own arguments that belong to
//! no module (a site, layer, file extension or run count that cannot be used) are
//! [`InputError`]s.

use std::path::PathBuf;

/// Whether an error is the user's input or the work itself.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// The input is invalid: a recipe, machine file, spectrum, argument, run folder or site
    /// that does not exist or cannot be used.
    InvalidInput,
    /// The work failed: hardware fault, I/O error, a fit that did not converge.
    Failed,
}

/// An argument that cannot be used, with what would be accepted.
#[derive(Debug, thiserror::Error)]
pub enum InputError {
    /// A site number that the run's plan does not have.
    #[error("site {site} is not in this run's plan, which has sites 1..{sites}")]
    SiteNotInPlan { site: usize, sites: usize },
    /// A fitted layer the run does not have (`layer` counts from 1).
    #[error("--layer {layer}: this run has {layers} fitted layer(s); give 1..{layers}")]
    NoSuchLayer { layer: usize, layers: usize },
    /// An output file whose extension names a format that is not written.
    #[error("{}: the file name must end in {allowed}", path.display())]
    UnsupportedExtension {
        path: PathBuf,
        allowed: &'static str,
    },
    /// Any other argument: which one and what to give instead.
    #[error("{0}")]
    Argument(String),
}

impl InputError {
    /// An argument error from its message (which names the argument and says what to give).
    pub fn argument(message: impl Into<String>) -> InputError {
        InputError::Argument(message.into())
    }
}

/// The kind of an error: the outermost cause whose type is known decides; an error of no
/// known type is failed work. Raise a typed error as the error itself, not as `.context(..)`
/// (a context value is not a cause the chain can be asked about).
pub fn kind(e: &anyhow::Error) -> Kind {
    e.chain().find_map(kind_of_cause).unwrap_or(Kind::Failed)
}

/// The kind of one cause, when its type says.
fn kind_of_cause(cause: &(dyn std::error::Error + 'static)) -> Option<Kind> {
    use crate::bench::{BenchError, MachineError};
    use crate::fit::FitError;
    use crate::history::location::LocationError;
    use crate::map::MapError;
    use crate::optics::OpticsError;
    use crate::recipe::RecipeError;
    use crate::run::folder::RunFolderError;
    use crate::run::id::NameError;
    use crate::run::refit::PlanMismatch;
    use crate::spectrum::SpectrumError;
    let input = |yes: bool| {
        Some(if yes {
            Kind::InvalidInput
        } else {
            Kind::Failed
        })
    };
    if cause.is::<InputError>()
        || cause.is::<RecipeError>()
        || cause.is::<MachineError>()
        || cause.is::<SpectrumError>()
        || cause.is::<OpticsError>()
        || cause.is::<NameError>()
        || cause.is::<PlanMismatch>()
        || cause.is::<LocationError>()
    {
        return Some(Kind::InvalidInput);
    }
    if let Some(e) = cause.downcast_ref::<RunFolderError>() {
        return input(!matches!(e, RunFolderError::Io { .. }));
    }
    if let Some(e) = cause.downcast_ref::<FitError>() {
        // A method that finds no answer is failed work; everything else is what was given.
        return input(!matches!(e, FitError::Method { .. }));
    }
    if let Some(e) = cause.downcast_ref::<MapError>() {
        return input(matches!(e, MapError::SitesTable { .. }));
    }
    if cause
        .downcast_ref::<crate::run::plan::PlanError>()
        .is_some()
    {
        return input(true);
    }
    if let Some(e) = cause.downcast_ref::<BenchError>() {
        return input(matches!(e, BenchError::OutsideTravel(_)));
    }
    None
}

#[cfg(test)]
mod tests {
    use super::*;
    use anyhow::Context;

    #[test]
    fn input_errors_are_invalid_input_through_context() {
        let e = anyhow::Error::new(InputError::SiteNotInPlan {
            site: 999,
            sites: 49,
        })
        .context("remeasure stopped");
        assert_eq!(kind(&e), Kind::InvalidInput);
        let named = crate::run::id::check_name("wafer id", "A/B");
        let e = named.context("cannot create the run").unwrap_err();
        assert_eq!(kind(&e), Kind::InvalidInput);
    }

    #[test]
    fn unknown_and_io_errors_are_failed_work() {
        assert_eq!(kind(&anyhow::anyhow!("port vanished")), Kind::Failed);
        let io = std::io::Error::new(std::io::ErrorKind::PermissionDenied, "denied");
        let e = crate::run::folder::RunFolderError::Io {
            path: "runs/x/run.toml".into(),
            source: io,
        };
        assert_eq!(kind(&anyhow::Error::new(e)), Kind::Failed);
    }

    #[test]
    fn a_fit_error_is_input_unless_the_method_found_no_answer() {
        let method = crate::fit::FitError::Method {
            method: "model",
            message: "no convergence".into(),
        };
        assert_eq!(kind(&anyhow::Error::new(method)), Kind::Failed);
        // Transparent variants hide the inner error from the chain: the variant decides.
        let window = crate::fit::FitError::Spectrum(crate::spectrum::SpectrumError::Invalid(
            "0 pixels in the fitting window".into(),
        ));
        assert_eq!(kind(&anyhow::Error::new(window)), Kind::InvalidInput);
    }
}
