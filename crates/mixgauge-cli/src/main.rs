//! `mixgauge`: the command line. Parsing lives in [`args`], each command in its own module;
//! this file maps the outcome to an exit code: 0 ok, 2 usage or input error, 1 anything else.

mod args;
mod demo;
mod failure;
mod fit;
mod gate;
mod inputs;
mod score;
mod serve;
mod sweep;

use std::process::ExitCode;

use clap::Parser;

/// `mixgauge demo`: the data file, then an ordinary `sweep` of it with the regimes as labels.
fn run_demo(a: &args::DemoArgs) -> Result<(), failure::Failure> {
    let data = demo::ensure_data(&a.data_dir)?;
    std::fs::create_dir_all(&a.out_dir).map_err(|e| failure::io("create", &a.out_dir, e))?;
    let result = a.out_dir.join("result.json");
    let report = a.out_dir.join("report.html");
    let demo_components = format!(
        "{}..{}",
        demo::DEMO_COMPONENTS[0],
        demo::DEMO_COMPONENTS[demo::DEMO_COMPONENTS.len() - 1]
    );
    let argv = [
        "mixgauge".as_ref(),
        "sweep".as_ref(),
        data.as_os_str(),
        "--labels".as_ref(),
        "regime".as_ref(),
        "--components".as_ref(),
        demo_components.as_ref(),
        "--out".as_ref(),
        result.as_os_str(),
        "--report".as_ref(),
        report.as_os_str(),
    ];
    let cli =
        args::Cli::try_parse_from(argv).map_err(|e| failure::Failure::Other(e.to_string()))?;
    let args::Command::Sweep(sweep_args) = cli.command else {
        unreachable!("parsed as sweep")
    };
    sweep::run(&sweep_args)?;
    eprintln!("result: {}\nreport: {}", result.display(), report.display());
    Ok(())
}

fn main() -> ExitCode {
    let cli = match args::Cli::try_parse() {
        Ok(cli) => cli,
        Err(e) => {
            let code = if e.use_stderr() { 2 } else { 0 };
            let _ = e.print();
            return ExitCode::from(code);
        }
    };
    if let args::Command::Gate(a) = &cli.command {
        return match gate::run(a) {
            Ok(true) => ExitCode::SUCCESS,
            Ok(false) => ExitCode::from(1),
            Err(failure) => {
                eprintln!("mixgauge: {failure}");
                // A gate that cannot judge is a usage or input error to CI, never a pass.
                ExitCode::from(2)
            }
        };
    }
    let outcome = match cli.command {
        args::Command::Fit(a) => fit::run(&a),
        args::Command::Score(a) => score::run(&a),
        args::Command::Sweep(a) => sweep::run(&a),
        args::Command::Demo(a) => run_demo(&a),
        args::Command::Serve(a) => serve::run(a),
        args::Command::Worker(a) => serve::work(a),
        args::Command::Gate(_) => unreachable!("handled above"),
    };
    match outcome {
        Ok(()) => ExitCode::SUCCESS,
        Err(failure) => {
            eprintln!("mixgauge: {failure}");
            ExitCode::from(failure.exit_code())
        }
    }
}
