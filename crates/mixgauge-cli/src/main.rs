//! `mixgauge`: the command line. Parsing lives in [`args`], each command in its own module;
//! this file maps the outcome to an exit code: 0 ok, 2 usage or input error, 1 anything else.

mod args;
mod failure;
mod fit;
mod inputs;
mod score;
mod sweep;

use std::process::ExitCode;

use clap::Parser;

fn main() -> ExitCode {
    let cli = match args::Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    let outcome = match cli.command {
        args::Command::Fit(a) => fit::run(&a),
        args::Command::Score(a) => score::run(&a),
        args::Command::Sweep(a) => sweep::run(&a),
    };
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            eprintln!("mixgauge: {failure}");
            ExitCode::from(failure.exit_code())
        }
    }
}
