//! `isosbestic`: the command-line front end. Thin by design: it parses flags into the library's
//! parameter structs, calls one library entry point per subcommand and renders the result.
//!
//! Exit codes: 0 success; 1 the run finished but did not converge or a check failed;
//! 2 bad input or usage.

mod batch;
mod compare;
mod fit;
mod input;
mod inspect;
mod medium;
mod resolve;
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
    /// Soft resolution (MCR-ALS): profiles and spectra without an equilibrium model.
    Resolve(resolve::ResolveArgs),
    /// Fit ln K(T) points (van 't Hoff, optional ΔCp°).
    Vanthoff(vanthoff::VanthoffArgs),
    /// Simulate a data set from a model and a plan (for planning experiments).
    Simulate(simulate::SimulateArgs),
    /// Compare fitted molar absorptivities with a reference table (pass/fail per row).
    Compare(compare::CompareArgs),
    /// Fit every data set under a folder in parallel: one report per set and a summary table.
    Batch(batch::BatchArgs),
}

/// The current time as an RFC 3339 UTC string (for report headers).
pub fn utc_timestamp() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs());
    let (days, rem) = ((secs / 86_400) as i64, secs % 86_400);
    // civil date from days since 1970-01-01 (proleptic Gregorian calendar)
    let z = days + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
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
        Command::Resolve(args) => resolve::run(&args),
        Command::Vanthoff(args) => vanthoff::run(&args),
        Command::Simulate(args) => simulate::run(&args),
        Command::Compare(args) => compare::run(&args),
        Command::Batch(args) => batch::run(&args),
    };
    match outcome {
        Ok(code) => code,
        Err(e) => {
            eprintln!("isosbestic: error: {e}");
            ExitCode::from(EXIT_BAD_INPUT)
        }
    }
}
