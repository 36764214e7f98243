//! `isosbestic`: the command-line front end. Thin by design: it parses flags into the library's
//! parameter structs, calls one library entry point per subcommand and renders the result.
//!
//! Exit codes: 0 success; 1 the run finished but did not converge or a check failed;
//! 2 bad input or usage.

mod fit;
mod input;
mod inspect;
mod simulate;
mod vanthoff;

use clap::{Parser, Subcommand};
use std::process::ExitCode;

/// Exit code: the run finished but did not converge or a check failed.
pub const EXIT_CHECK_FAILED: u8 = 1;
/// Exit code: bad input or usage.
pub const EXIT_BAD_INPUT: u8 = 2;

#[derive(Debug, Parser)]
#[command(
    name = "isosbestic",
    version,
    about = "Multi-wavelength deconvolution of temperature-dependent equilibria from UV–Vis spectra",
    long_about = "Multi-wavelength deconvolution of temperature-dependent equilibria from UV–Vis spectra.\n\n\
        Exit codes: 0 success; 1 the run finished but did not converge or a check failed; \
        2 bad input or usage."
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Summarise a data set: ranges, saturation, singular values, noise, rank, evolving factors.
    Inspect(inspect::InspectArgs),
    /// Global fit of an equilibrium model's ΔH°, ΔS° (ΔCp°) to all spectra at once.
    Fit(fit::FitArgs),
    /// Fit ln K(T) points (van 't Hoff, optional ΔCp°).
    Vanthoff(vanthoff::VanthoffArgs),
    /// Simulate a data set from a model and a plan (for planning experiments).
    Simulate(simulate::SimulateArgs),
}

/// A usage error from a subcommand (exit code 2), carried as a library error.
pub fn usage(message: impl Into<String>) -> isosbestic::Error {
    isosbestic::Error::Usage(message.into())
}

fn main() -> ExitCode {
    let cli = match Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() {
                ExitCode::from(EXIT_BAD_INPUT)
            } else {
                ExitCode::SUCCESS
            };
        }
    };
    let outcome = match cli.command {
        Command::Inspect(args) => inspect::run(&args),
        Command::Fit(args) => fit::run(&args),
        Command::Vanthoff(args) => vanthoff::run(&args),
        Command::Simulate(args) => simulate::run(&args),
    };
    match outcome {
        Ok(code) => code,
        Err(e) => {
            eprintln!("isosbestic: error: {e}");
            ExitCode::from(EXIT_BAD_INPUT)
        }
    }
}
