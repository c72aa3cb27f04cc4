//! closure-budget command-line entry point: parse arguments, call the library, print the error
//! chain, set the exit code.

use anyhow::{bail, Context};
use clap::Parser;
use closure_budget::cli::{Cli, Command, SystemArgs};
use closure_budget::cost::spec::{cost_report, Amount, CostSpec};
use closure_budget::cost::CostInputs;
use closure_budget::data::{
    write_trajectory, OutputFormats, Trajectory, TrajectoryMeta, SIDECAR_SCHEMA,
};
use closure_budget::slurm::{self, SlurmOptions};
use closure_budget::study::measured::{fit_measured, MeasuredOptions};
use closure_budget::study::{load_plan, run_study, RunOptions, StudyResults};
use closure_budget::systems::{
    largest_lyapunov, simulate, LyapunovSpec, SimulationSpec, SystemSpec,
};
use closure_budget::{report, study};
use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

fn main() -> ExitCode {
    restore_default_sigpipe();
    let cli = Cli::parse();
    match run(cli) {
        Ok(code) => code,
        Err(e) => {
            eprintln!("error: {}", error_chain(&e));
            // 130: stopped by Ctrl-C (the shell's convention for SIGINT), resumable.
            match e.downcast_ref::<study::StudyError>() {
                Some(study::StudyError::Interrupted { .. }) => ExitCode::from(130),
                _ => ExitCode::from(2),
            }
        }
    }
}

/// Rust ignores SIGPIPE, so printing into a closed pipe (`closure-budget fit x.csv | head`)
/// would panic; with the default action the process ends quietly, as Unix tools do.
fn restore_default_sigpipe() {
    #[cfg(unix)]
    // SAFETY: called first thing in main, before any thread exists; SIG_DFL is a valid action.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}

/// The output directory: as given, or reports/STUDY-NAME; refused when it is a file.
fn out_dir(given: Option<PathBuf>, plan: &study::StudyPlan) -> anyhow::Result<PathBuf> {
    let out = match given {
        Some(p) => {
            if p.is_file() {
                bail!("--out {} is a file; give a folder", p.display());
            }
            p
        }
        None => {
            let p = PathBuf::from("reports").join(&plan.name);
            if p.is_file() {
                bail!(
                    "the default output folder {} is a file; give a folder with --out DIR",
                    p.display()
                );
            }
            p
        }
    };
    Ok(out)
}

fn plural(n: usize) -> &'static str {
    if n == 1 {
        ""
    } else {
        "s"
    }
}

/// A flag Ctrl-C sets; a second Ctrl-C ends the process at once.
fn stop_on_ctrl_c() -> anyhow::Result<Arc<AtomicBool>> {
    let stop = Arc::new(AtomicBool::new(false));
    let flag = stop.clone();
    ctrlc::set_handler(move || {
        if flag.swap(true, Ordering::SeqCst) {
            eprintln!("\ninterrupted again: quitting now; points in flight are lost, stored ones are kept");
            std::process::exit(130);
        }
        eprintln!(
            "\nstopping after the points in flight are stored (Ctrl-C again to quit at once)"
        );
    })
    .context("cannot install the Ctrl-C handler")?;
    Ok(stop)
}

/// Writes the report and prints the summary (text, JSON, or nothing).
fn finish(
    results: &StudyResults,
    out: &std::path::Path,
    quiet: bool,
    json: bool,
) -> anyhow::Result<()> {
    let written = report::write_report(results, out)?;
    if json {
        let summary = serde_json::json!({
            "out": out,
            "written": written,
            "points": results.document.points,
            "warnings": results.document.warnings,
            "estimates": results.history.last().map(|h| &h.estimates),
        });
        println!("{}", serde_json::to_string_pretty(&summary)?);
    } else if !quiet {
        print!("{}", report::text_summary(&results.document));
        println!("\nwritten:");
        for p in written {
            println!("  {}", p.display());
        }
    }
    Ok(())
}

fn run(cli: Cli) -> anyhow::Result<ExitCode> {
    match cli.command {
        Command::Run(a) => {
            let plan = load_plan(&a.study)?;
            let out = out_dir(a.out, &plan)?;
            let options = RunOptions {
                out_dir: out.clone(),
                threads: a.threads,
                progress: !a.quiet && !a.json && std::io::stderr().is_terminal(),
                stop: Some(stop_on_ctrl_c()?),
                adopt: a.adopt,
                drop_damaged: a.drop_damaged,
            };
            if let Some(shard) = a.shard {
                let summary = study::run_shard(&plan, &options, shard)?;
                if a.json {
                    println!("{}", serde_json::to_string_pretty(&summary)?);
                } else if !a.quiet {
                    println!(
                        "shard {}: {} unit{} assigned, {} point{} computed now ({} already in this shard's store) of {} missing in the study; written to {}\nwhen every shard is done: closure-budget merge {} --out {}",
                        summary.shard,
                        summary.units,
                        plural(summary.units),
                        summary.computed,
                        plural(summary.computed),
                        summary.already_stored,
                        summary.missing_in_study,
                        summary.store.display(),
                        a.study.display(),
                        out.display()
                    );
                }
                return Ok(ExitCode::SUCCESS);
            }
            let results = run_study(&plan, &options)?;
            finish(&results, &out, a.quiet, a.json)?;
        }
        Command::Merge(a) => {
            let plan = load_plan(&a.study)?;
            let out = out_dir(a.out, &plan)?;
            let options = RunOptions {
                out_dir: out.clone(),
                threads: a.threads,
                progress: !a.quiet && !a.json && std::io::stderr().is_terminal(),
                stop: None,
                adopt: a.adopt,
                drop_damaged: a.drop_damaged,
            };
            let results = study::merge_study(&plan, &options)?;
            finish(&results, &out, a.quiet, a.json)?;
        }
        Command::Status(a) => {
            let plan = load_plan(&a.study)?;
            let out = out_dir(a.out, &plan)?;
            let options = RunOptions {
                out_dir: out,
                threads: None,
                progress: !a.json && std::io::stderr().is_terminal(),
                stop: None,
                ..RunOptions::default()
            };
            let status = study::study_status(&plan, &options)?;
            if a.json {
                println!("{}", serde_json::to_string_pretty(&status)?);
            } else {
                print!("{}", study::status::describe_status(&status));
            }
        }
        Command::Prune(a) => {
            let plan = load_plan(&a.study)?;
            let out = out_dir(a.out, &plan)?;
            let options = RunOptions {
                out_dir: out,
                threads: None,
                progress: !a.json && std::io::stderr().is_terminal(),
                stop: None,
                adopt: a.adopt,
                drop_damaged: a.drop_damaged,
            };
            let summary = study::prune_study(&plan, &options)?;
            if a.json {
                println!("{}", serde_json::to_string_pretty(&summary)?);
            } else {
                println!(
                    "{}: {} record{} of points the study plans kept, {} removed",
                    summary.store.display(),
                    summary.planned,
                    plural(summary.planned),
                    summary.removed
                );
            }
        }
        Command::RepairStore(a) => {
            let path = if a.store.is_dir() {
                a.store.join(study::records::RECORDS_FILE)
            } else {
                a.store.clone()
            };
            if !path.is_file() {
                bail!(
                    "{} is neither a study's output folder (with {}) nor a store file; give the folder a run wrote to",
                    a.store.display(),
                    study::records::RECORDS_FILE
                );
            }
            let r = study::records::repair(&path)?;
            if r.moved_lines.is_empty() {
                println!(
                    "{}: no damage; {} record{} intact, nothing changed",
                    r.store.display(),
                    r.kept,
                    plural(r.kept)
                );
            } else {
                println!(
                    "{}: {} intact record{} kept; {} line{} moved to {} (lines {})",
                    r.store.display(),
                    r.kept,
                    plural(r.kept),
                    r.moved_lines.len(),
                    plural(r.moved_lines.len()),
                    r.side_file.display(),
                    r.moved_lines
                        .iter()
                        .map(|l| l.to_string())
                        .collect::<Vec<_>>()
                        .join(", ")
                );
            }
        }
        Command::Slurm(a) => {
            let plan = load_plan(&a.study)?;
            let out = a
                .out
                .unwrap_or_else(|| PathBuf::from("reports").join(&plan.name));
            let binary = match a.binary {
                Some(b) => b,
                None => std::env::current_exe()
                    .context("cannot find this executable's path; give it with --binary")?,
            };
            let options = SlurmOptions {
                job_name: a
                    .job_name
                    .unwrap_or_else(|| slurm::default_job_name(&a.study)),
                study: a.study,
                out,
                array: a.array,
                partition: a.partition,
                time: a.time,
                cpus: a.cpus,
                mem: a.mem,
                account: a.account,
                binary,
            }
            .resolved()?;
            let script = slurm::batch_script(&options)?;
            let path = a
                .script
                .unwrap_or_else(|| options.out.join("submit-slurm.sh"));
            closure_budget::atomic::write_atomic(&path, script.as_bytes())
                .with_context(|| format!("cannot write {}", path.display()))?;
            make_executable(&path)?;
            println!("written: {}", path.display());
            println!("submit it once, on the cluster's login node:");
            println!("  bash {}", slurm::shell_quote(&path.to_string_lossy()));
        }
        Command::Check(a) => {
            let plan = load_plan(&a.study)?;
            print!("{}", study::plan::describe(&plan));
        }
        Command::Simulate(a) => {
            let (system, dt) = system_from_args(&a.system)?;
            let spec = SimulationSpec {
                system: system.clone(),
                dt,
                sample_interval: a.sample_interval,
                spin_up: a.spin_up,
                samples: a.samples,
                seed: a.system.seed,
            };
            let sim = simulate(&spec, None)?;
            let traj = Trajectory {
                values: sim.resolved,
                subgrid: sim.subgrid,
                meta: TrajectoryMeta {
                    schema: SIDECAR_SCHEMA.into(),
                    system: Some(system.label().into()),
                    parameters: system.parameters(),
                    dt: Some(dt),
                    sample_interval: a.sample_interval,
                    spin_up: Some(a.spin_up),
                    variables: sim.resolved_names,
                    subgrid_variables: sim.subgrid_names,
                    seed: Some(a.system.seed),
                    tool_version: env!("CARGO_PKG_VERSION").into(),
                },
            };
            let formats = OutputFormats {
                npy: !a.no_npy,
                csv: a.csv,
            };
            for p in write_trajectory(&traj, &a.out, formats)? {
                println!("{}", p.display());
            }
        }
        Command::Lyapunov(a) => {
            let (system, dt) = system_from_args(&a.system)?;
            let est = largest_lyapunov(&LyapunovSpec {
                system: system.clone(),
                dt,
                spin_up: a.spin_up,
                duration: a.duration,
                renormalise_every: a.renormalise_every,
                seed: a.system.seed,
            })?;
            if a.json {
                println!("{}", serde_json::to_string_pretty(&est)?);
            } else {
                println!(
                    "{}: largest Lyapunov exponent {:.4} ± {:.4} per model time unit \
                     (Lyapunov time {:.4}); {} blocks over {} time units, dt = {dt}",
                    system.label(),
                    est.exponent,
                    est.standard_error,
                    1.0 / est.exponent,
                    est.blocks,
                    est.duration
                );
            }
        }
        Command::Fit(a) => {
            let doc = fit_measured(
                &a.csv,
                &MeasuredOptions {
                    targets: a.targets,
                    scale: if a.log_scale {
                        closure_budget::curves::FitScale::Log
                    } else {
                        closure_budget::curves::FitScale::Linear
                    },
                    draws: a.draws,
                    confidence: a.confidence,
                    trust_factor: a.trust_factor,
                    seed: a.seed,
                    direction: if a.lower_is_better {
                        closure_budget::curves::Direction::Decreasing
                    } else {
                        closure_budget::curves::Direction::Increasing
                    },
                },
            )?;
            print!("{}", report::text_summary(&doc));
            if let Some(path) = &a.json {
                closure_budget::atomic::write_atomic(path, &report::budget_json(&doc))
                    .with_context(|| format!("cannot write {}", path.display()))?;
                println!("written: {}", path.display());
            }
            if let Some(dir) = &a.report {
                for p in report::write_report(&StudyResults::new(doc), dir)? {
                    println!("written: {}", p.display());
                }
            }
        }
        Command::Cost(a) => {
            let text = std::fs::read_to_string(&a.inputs)
                .with_context(|| format!("cannot read {}", a.inputs.display()))?;
            let inputs = cost_inputs_from_toml(&text)
                .with_context(|| format!("{} holds no valid cost inputs", a.inputs.display()))?;
            let amount = match (a.samples, a.sampled_time) {
                (Some(n), _) => Amount::Samples(n),
                (None, Some(t)) => Amount::SampledTime(t),
                (None, None) => bail!("give --samples or --sampled-time"),
            };
            let r = cost_report(&CostSpec {
                amount,
                sample_interval: a.sample_interval,
                variables: a.variables,
                inputs,
            })?;
            if a.json {
                println!("{}", serde_json::to_string_pretty(&r)?);
            } else {
                print!("{}", report::cost_text(&r));
            }
        }
    }
    Ok(ExitCode::SUCCESS)
}

/// Marks a written script executable by everyone who can read it (Unix only).
fn make_executable(path: &std::path::Path) -> anyhow::Result<()> {
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mut perms = std::fs::metadata(path)
            .with_context(|| format!("cannot read {}", path.display()))?
            .permissions();
        perms.set_mode(perms.mode() | ((perms.mode() & 0o444) >> 2));
        std::fs::set_permissions(path, perms)
            .with_context(|| format!("cannot make {} executable", path.display()))?;
    }
    #[cfg(not(unix))]
    let _ = path;
    Ok(())
}

/// Cost inputs from a study file's `[cost]` table, or from a file of cost keys alone.
fn cost_inputs_from_toml(text: &str) -> anyhow::Result<CostInputs> {
    let value: toml::Table = toml::from_str(text)?;
    let table = match value.get("cost") {
        Some(toml::Value::Table(t)) => t.clone(),
        _ => value,
    };
    Ok(table.try_into()?)
}

/// The error and its causes joined by ": ", leaving out a cause whose text the message before it
/// already contains (several error types quote their source in their own message).
fn error_chain(e: &anyhow::Error) -> String {
    let mut out = e.to_string();
    for cause in e.chain().skip(1) {
        let text = cause.to_string();
        if !out.contains(&text) {
            out.push_str(": ");
            out.push_str(&text);
        }
    }
    out
}

fn system_from_args(a: &SystemArgs) -> anyhow::Result<(SystemSpec, f64)> {
    let Some(mut system) = SystemSpec::with_defaults(&a.system) else {
        bail!(
            "unknown system '{}'; built-in systems are lorenz-63, lorenz-96, two-scale-lorenz-96",
            a.system
        );
    };
    for kv in &a.set {
        let (k, v) = kv
            .split_once('=')
            .with_context(|| format!("--set '{kv}' is not KEY=VALUE (e.g. --set forcing=20)"))?;
        system.set(k.trim(), v.trim()).map_err(anyhow::Error::msg)?;
    }
    system.validate()?;
    let dt = a.dt.unwrap_or(match system {
        SystemSpec::TwoScaleLorenz96 { .. } => 0.005,
        _ => 0.01,
    });
    Ok((system, dt))
}
