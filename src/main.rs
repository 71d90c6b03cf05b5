//! The `vastmul` command line: argument parsing and glue. All the work is
//! in the library; this file maps its typed errors to exit codes.

use clap::{Parser, Subcommand, ValueEnum};
use std::path::PathBuf;
use std::process::ExitCode;
use vastmul::display::{Display, Style};
use vastmul::error::exit;
use vastmul::format::Format;
use vastmul::job::{multiply_files, MulOptions};
use vastmul::plan::Force;
use vastmul::{Error, Radix};

#[derive(Parser)]
#[command(
    name = "vastmul",
    version,
    about = "Exact products of enormous integers stored in files"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
    /// No progress display and no summary on stderr; errors still show.
    #[arg(long, short, global = true)]
    quiet: bool,
}

#[derive(Clone, Copy, ValueEnum)]
enum FormatArg {
    Dec,
    Hex,
    Limbs,
    Container,
}

impl From<FormatArg> for Format {
    fn from(f: FormatArg) -> Self {
        match f {
            FormatArg::Dec => Format::Decimal,
            FormatArg::Hex => Format::Hex,
            FormatArg::Limbs => Format::Limbs,
            FormatArg::Container => Format::Container,
        }
    }
}

#[derive(Clone, Copy, ValueEnum)]
enum RadixArg {
    Dec,
    Hex,
}

#[derive(Clone, Copy, ValueEnum)]
enum AlgorithmArg {
    Auto,
    Schoolbook,
    Ntt,
    Pieces,
}

#[derive(Subcommand)]
enum Command {
    /// Run the main job end to end on built-in seeded data and report:
    /// generate two operands, multiply them out of core under a small
    /// memory budget, check the product from the files.
    #[command(
        after_help = "Examples:\n  vastmul demo\n  vastmul demo --digits 200000000 --memory 256MiB --dir demo-files --keep"
    )]
    Demo {
        /// Digits of each generated operand.
        #[arg(long, default_value_t = vastmul::demo::DEFAULT_DIGITS)]
        digits: u64,
        /// Memory budget of the multiplication (as for `mul`).
        #[arg(long, value_parser = parse_size_arg, default_value = "64MiB")]
        memory: u64,
        /// Directory for the demo's files (default: a new temporary one).
        #[arg(long)]
        dir: Option<PathBuf>,
        /// Keep the files afterwards.
        #[arg(long)]
        keep: bool,
        /// Replace demo files left in --dir by an earlier run.
        #[arg(long)]
        force: bool,
        /// Worker threads (default: every core).
        #[arg(long, allow_negative_numbers = true)]
        threads: Option<usize>,
    },
    /// Multiply two operand files into a product file.
    #[command(after_help = "Example:\n  vastmul mul a.txt b.txt -o product.txt --threads 2")]
    Mul {
        /// First operand file.
        a: PathBuf,
        /// Second operand file (the same file squares the first).
        b: PathBuf,
        /// Product file; written atomically once complete.
        #[arg(short, long)]
        output: PathBuf,
        /// Worker threads (default: every core).
        #[arg(long, allow_negative_numbers = true)]
        threads: Option<usize>,
        /// Operand format (default: detected from each file's content).
        #[arg(long, value_enum)]
        in_format: Option<FormatArg>,
        /// Product format (default: the first operand's format).
        #[arg(long, value_enum)]
        out_format: Option<FormatArg>,
        /// Replace an existing output file.
        #[arg(long)]
        force: bool,
        /// Force an algorithm (for benchmarks and tests).
        #[arg(long, value_enum, default_value = "auto", hide = true)]
        algorithm: AlgorithmArg,
        /// Memory budget, e.g. 512MiB, 4GiB, 1.5G (G = 10^9, GiB = 2^30;
        /// default: half of physical RAM). Beyond it the work goes to scratch files.
        #[arg(long, value_parser = parse_size_arg)]
        memory: Option<u64>,
        /// Directory for scratch files and the resumable state of
        /// out-of-core runs (default: the output's directory).
        #[arg(long)]
        scratch: Option<PathBuf>,
        /// Discard the state an interrupted run left and start over.
        #[arg(long)]
        restart: bool,
        /// Keep the state directory after success (it is removed otherwise).
        #[arg(long)]
        keep_state: bool,
        /// Keep no resumable state (benchmarks of what checkpoints cost).
        #[arg(long, hide = true)]
        no_checkpoint: bool,
        /// Skip the residue check of the product against its factors that
        /// runs before the product is renamed into place.
        #[arg(long)]
        no_self_check: bool,
        /// Print a machine-readable report on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Write a reproducible random operand.
    #[command(after_help = "Example:\n  vastmul gen --digits 1000000 --seed 7 -o a.txt")]
    Gen {
        /// Number of digits (the leading one is never zero).
        #[arg(long)]
        digits: u64,
        /// Seed; the same seed gives the same digits on any machine.
        #[arg(long, default_value_t = 1)]
        seed: u64,
        /// Decimal or hexadecimal digits.
        #[arg(long, value_enum, default_value = "dec")]
        radix: RadixArg,
        /// Output file.
        #[arg(short, long)]
        output: PathBuf,
        /// Replace an existing output file.
        #[arg(long)]
        force: bool,
        /// Worker threads (default: every core).
        #[arg(long, allow_negative_numbers = true)]
        threads: Option<usize>,
    },
    /// Show an operand's format, sign, size and BLAKE3.
    #[command(after_help = "Example:\n  vastmul info product.txt")]
    Info {
        /// Operand file.
        file: PathBuf,
        /// Format (default: detected).
        #[arg(long, value_enum)]
        in_format: Option<FormatArg>,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
    /// Check C = A x B (or C = A^2) from the files alone, by residues
    /// modulo three fixed primes and random ones.
    #[command(
        after_help = "Examples:\n  vastmul check a.txt b.txt c.txt\n  vastmul check --square a.txt c.txt --seed 12345\nExit code 0 when the check passes, 6 when it fails."
    )]
    Check {
        /// A B C, A C with --square, or C with --file.
        #[arg(num_args = 1..=3, required = true)]
        files: Vec<PathBuf>,
        /// Check C = A^2 (two files: A C).
        #[arg(long)]
        square: bool,
        /// Check one file against its own manifest (one file: C).
        #[arg(long, conflicts_with = "square")]
        file: bool,
        /// Seed of the random moduli (printed by every check; repeats it).
        #[arg(long)]
        seed: Option<u64>,
        /// How many random moduli, besides the three fixed ones.
        #[arg(long, default_value_t = 2)]
        random: usize,
        /// Print the report as JSON.
        #[arg(long)]
        json: bool,
        /// Format of all three files (default: detected for each).
        #[arg(long, value_enum)]
        in_format: Option<FormatArg>,
        /// Worker threads (default: every core).
        #[arg(long, allow_negative_numbers = true)]
        threads: Option<usize>,
    },
    /// Print the plan for a product without computing it.
    #[command(after_help = "Example:\n  vastmul plan a.txt b.txt --json")]
    Plan {
        /// First operand file.
        a: PathBuf,
        /// Second operand file.
        b: PathBuf,
        /// Worker threads (default: every core).
        #[arg(long, allow_negative_numbers = true)]
        threads: Option<usize>,
        /// Operand format (default: detected).
        #[arg(long, value_enum)]
        in_format: Option<FormatArg>,
        /// Memory budget, as for `mul`.
        #[arg(long, value_parser = parse_size_arg)]
        memory: Option<u64>,
        /// Print JSON instead of text.
        #[arg(long)]
        json: bool,
    },
}

fn parse_size_arg(s: &str) -> Result<u64, String> {
    vastmul::size::parse_size(s).map_err(|e| e.to_string())
}

fn default_threads() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// Builds the global thread pool once, refusing zero threads.
fn set_threads(threads: Option<usize>) -> Result<usize, Error> {
    let n = threads.unwrap_or_else(default_threads);
    if n == 0 {
        return Err(Error::usage(
            "--threads 0: at least one thread is needed",
            "omit --threads to use every core, or pass a positive number",
        ));
    }
    // Only fails if a pool was built before, which this binary never does.
    let _ = rayon::ThreadPoolBuilder::new()
        .num_threads(n)
        .build_global();
    Ok(n)
}

/// Runs `f` with the progress display on stderr, cleared before it returns.
fn with_progress<T>(quiet: bool, f: impl FnOnce() -> T) -> T {
    let display = Display::start(Style::for_stderr(quiet));
    let r = f();
    display.finish();
    r
}

fn run(cli: Cli) -> Result<(), Error> {
    let quiet = cli.quiet;
    match cli.command {
        Command::Demo {
            digits,
            memory,
            dir,
            keep,
            force,
            threads,
        } => {
            let threads = set_threads(threads)?;
            vastmul::interrupt::install();
            let temporary = dir.is_none();
            let dir = dir.unwrap_or_else(|| {
                std::env::temp_dir().join(format!("vastmul-demo-{}", std::process::id()))
            });
            println!("vastmul demo: an orbit-survey team multiplies its two ledger integers");
            println!("  files in {}", dir.display());
            let opts = vastmul::demo::DemoOptions {
                dir: dir.clone(),
                digits,
                memory,
                threads,
                force: force || temporary,
            };
            let r = with_progress(quiet, || vastmul::demo::run(&opts));
            if temporary && !keep {
                let _ = std::fs::remove_dir_all(&dir);
            }
            for line in vastmul::demo::describe(&r?) {
                println!("{line}");
            }
            if temporary && !keep {
                println!(
                    "  removed {} (pass --keep to keep the files)",
                    dir.display()
                );
            }
        }
        Command::Mul {
            a,
            b,
            output,
            threads,
            in_format,
            out_format,
            force,
            algorithm,
            memory,
            scratch,
            restart,
            keep_state,
            no_checkpoint,
            no_self_check,
            json,
        } => {
            let threads = set_threads(threads)?;
            vastmul::interrupt::install();
            let opts = MulOptions {
                a,
                b,
                output,
                in_format: in_format.map(Into::into),
                out_format: out_format.map(Into::into),
                force,
                threads,
                algorithm: match algorithm {
                    AlgorithmArg::Auto => Force::Auto,
                    AlgorithmArg::Schoolbook => Force::Schoolbook,
                    AlgorithmArg::Ntt => Force::Ntt,
                    AlgorithmArg::Pieces => Force::Pieces,
                },
                memory,
                scratch,
                restart,
                keep_state,
                checkpoint: !no_checkpoint,
                self_check: !no_self_check,
                tamper: None,
                faults: None,
            };
            let report = with_progress(quiet, || multiply_files(&opts))?;
            if json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&report).expect("report serializes")
                );
            } else if !quiet {
                eprintln!(
                    "wrote {} ({} limbs of radix {}) in {:.3} s: open {:.3} s, compute {:.3} s, write {:.3} s",
                    opts.output.display(),
                    report.product_limbs,
                    report.plan.radix.name(),
                    report.open_seconds + report.compute_seconds + report.write_seconds,
                    report.open_seconds,
                    report.compute_seconds,
                    report.write_seconds
                );
            }
        }
        Command::Gen {
            digits,
            seed,
            radix,
            output,
            force,
            threads,
        } => {
            set_threads(threads)?;
            let radix = match radix {
                RadixArg::Dec => Radix::Decimal,
                RadixArg::Hex => Radix::Binary,
            };
            vastmul::gen::generate(&output, digits, seed, radix, force)?;
        }
        Command::Info {
            file,
            in_format,
            json,
        } => {
            let info = vastmul::info::info(&file, in_format.map(Into::into))?;
            if json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&info).expect("info serializes")
                );
            } else {
                println!("{info}");
            }
        }
        Command::Check {
            files,
            file: true,
            in_format,
            threads,
            json,
            ..
        } => {
            set_threads(threads)?;
            let [c] = files.as_slice() else {
                return Err(Error::usage(
                    "check --file needs one file: C",
                    "pass the product whose manifest to check it against",
                ));
            };
            let m = vastmul::manifest::check_file(c, in_format.map(Into::into))?;
            if json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&m).expect("manifests serialize")
                );
            } else {
                println!(
                    "check passed: {} matches its manifest {} (size, BLAKE3, sign, residues modulo {} primes)",
                    c.display(),
                    vastmul::manifest::path_for(c).display(),
                    m.residues.len()
                );
            }
        }
        Command::Check {
            files,
            square,
            seed,
            random,
            json,
            in_format,
            threads,
            file: false,
        } => {
            set_threads(threads)?;
            let (a, b, c) = match (square, files.as_slice()) {
                (false, [a, b, c]) => (a.clone(), Some(b.clone()), c.clone()),
                (true, [a, c]) => (a.clone(), None, c.clone()),
                (false, _) => {
                    return Err(Error::usage(
                        "check needs three files: A B C",
                        "pass the two factors and the product, or --square A C",
                    ))
                }
                (true, _) => {
                    return Err(Error::usage(
                        "check --square needs two files: A C",
                        "pass the operand and its square, or drop --square for A B C",
                    ))
                }
            };
            let request = vastmul::check::CheckRequest {
                a,
                b,
                c,
                format: in_format.map(Into::into),
                seed,
                random,
            };
            let r = with_progress(quiet, || vastmul::check::check(&request))?;
            if json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&r).expect("reports serialize")
                );
            } else {
                for m in &r.moduli {
                    println!(
                        "modulus {:>19} ({:6}): {:#018x} x {:#018x} = {:#018x}  pass",
                        m.modulus, m.kind, m.residues[0], m.residues[1], m.residues[2]
                    );
                }
                match r.manifest_agrees {
                    Some(true) => println!("manifest: agrees with the product"),
                    Some(false) => {}
                    None => println!("manifest: none beside the product"),
                }
                println!(
                    "check passed: {} moduli, {} fixed and {} random (seed {}; --seed {} repeats this check)",
                    r.moduli.len(),
                    r.moduli.len() - random,
                    random,
                    r.seed,
                    r.seed
                );
            }
        }
        Command::Plan {
            a,
            b,
            threads,
            in_format,
            memory,
            json,
        } => {
            let threads = set_threads(threads)?;
            let plan =
                vastmul::job::plan_files(&a, &b, in_format.map(Into::into), threads, memory)?;
            if json {
                println!(
                    "{}",
                    serde_json::to_string_pretty(&plan).expect("plan serializes")
                );
            } else {
                println!("{plan:#?}");
            }
        }
    }
    Ok(())
}

impl Cli {
    /// Whether the command reports as JSON on stdout.
    fn json(&self) -> bool {
        match &self.command {
            Command::Mul { json, .. }
            | Command::Info { json, .. }
            | Command::Check { json, .. }
            | Command::Plan { json, .. } => *json,
            Command::Demo { .. } | Command::Gen { .. } => false,
        }
    }
}

/// A reader that stops early (`vastmul plan A B | head`) closes the pipe;
/// like other command-line tools, vastmul then ends quietly by SIGPIPE
/// instead of failing to print (Rust ignores the signal by default, which
/// turns the closed pipe into a panic in `println!`).
fn quiet_on_closed_pipe() {
    #[cfg(unix)]
    // SAFETY: restoring a signal's default disposition before any other
    // thread exists touches no memory of this process.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}

fn main() -> ExitCode {
    quiet_on_closed_pipe();
    let cli = Cli::parse();
    let json = cli.json();
    match run(cli) {
        Ok(()) => ExitCode::from(exit::OK as u8),
        Err(e) => {
            eprintln!("vastmul: error: {e}");
            if json {
                // A script reading stdout learns the outcome there too.
                let report = serde_json::json!({
                    "ok": false,
                    "exit_code": e.exit_code(),
                    "error": e.to_string(),
                });
                println!("{report:#}");
            }
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
