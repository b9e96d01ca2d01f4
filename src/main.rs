//! The `cyclarc` command line: parses flags into the library's options and calls it.
//! Exit codes: 0 success; 1 a bound is broken or an archive is damaged; 2 usage or input
//! error; 3 a write failed; 4 interrupted.

use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Parser, Subcommand};

use cyclarc::archive::segment_list;
use cyclarc::jobs::pipeline;
use cyclarc::jobs::plan::{self, is_plan, Selection, ShardOutcome, DEFAULT_SHARD_BYTES};
use cyclarc::jobs::survey::survey;
use cyclarc::jobs::trend::{trend, trend_columns, trend_union, TrendQuery};
use cyclarc::options::{
    BearingSpec, BudgetChoice, EncodeOptions, Layout, ProtectSpec, RotorBarSpec,
};
use cyclarc::signal::RealFft;
use cyclarc::{decode_file, encode_file, plot, report, Archive, DigestPolicy, Error, JobControl};

#[derive(Parser)]
#[command(
    name = "cyclarc",
    version,
    about = "Archive periodic sensor logs as truncated Fourier series with a verified RMS error bound"
)]
struct Cli {
    /// Worker threads (default: all cores). The archive is the same for any count.
    #[arg(long, global = true)]
    threads: Option<usize>,
    #[command(subcommand)]
    command: Command,
}

#[derive(Subcommand)]
enum Command {
    /// Encode a Parquet source into an archive.
    Encode(Box<EncodeArgs>),
    /// Decode an archive back to Parquet in the source's layout.
    Decode {
        /// The archive, or a committed plan (PLAN.json: its parts as one archive).
        archive: PathBuf,
        /// Output Parquet file.
        #[arg(long)]
        out: PathBuf,
        /// Only these channels (repeatable).
        #[arg(long = "channel")]
        channels: Vec<String>,
        /// Keep samples at or after this time (RFC 3339, or integer ns since the epoch).
        #[arg(long)]
        from: Option<String>,
        /// Keep samples before this time (RFC 3339, or integer ns since the epoch).
        #[arg(long)]
        to: Option<String>,
        /// Decode what is intact: report a digest mismatch and every missing, repeated or
        /// damaged block (by channel and number) instead of refusing; exits 1 when any
        /// was found.
        #[arg(long)]
        salvage: bool,
        /// Print a JSON summary on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Check an archive against its source: every segment within budget, every checksum good.
    Verify {
        /// The archive, or a committed plan (PLAN.json: each part against its own source).
        archive: PathBuf,
        /// The source it was made from (not for a plan, which names its sources).
        #[arg(long)]
        source: Option<PathBuf>,
        /// Print the report as JSON on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Show what an archive holds, per channel.
    Inspect {
        /// The archive, or a committed plan (PLAN.json: its parts as one archive).
        archive: PathBuf,
        /// Print as JSON on stdout.
        #[arg(long)]
        json: bool,
        /// List every segment too (its start, samples, basis, order, cycles and row).
        #[arg(long)]
        segments: bool,
        /// Print the archive's metadata JSON instead.
        #[arg(long, conflicts_with_all = ["json", "segments"])]
        meta: bool,
    },
    /// Which budget to use: per channel the noise floor, the ratio-versus-budget curve
    /// (the real encoder on a sample of the source) and a recommended budget.
    Survey(Box<SurveyArgs>),
    /// Harmonics, THD, RMS and the fundamental over time, from the stored coefficients.
    Trend {
        /// The archive, or a committed plan (PLAN.json: its parts as one archive).
        archive: PathBuf,
        /// Only these channels (repeatable).
        #[arg(long = "channel")]
        channels: Vec<String>,
        /// Segments starting at or after this time (RFC 3339, or integer ns since the epoch).
        #[arg(long)]
        from: Option<String>,
        /// Segments starting before this time (RFC 3339, or integer ns since the epoch).
        #[arg(long)]
        to: Option<String>,
        /// Harmonics to report (comma-separated; 1 = the fundamental).
        #[arg(long, value_delimiter = ',', default_values_t = [1usize, 2, 3, 5, 7])]
        harmonics: Vec<usize>,
        /// Print CSV on stdout instead of the table.
        #[arg(long, conflicts_with = "json")]
        csv: bool,
        /// Print JSON on stdout instead of the table.
        #[arg(long)]
        json: bool,
        /// Also write the trend as a Parquet file.
        #[arg(long)]
        parquet: Option<PathBuf>,
        /// Also write an SVG chart (one panel per quantity).
        #[arg(long)]
        svg: Option<PathBuf>,
    },
    /// Cut a job's sources into shards: reads their footers only, writes PLAN (a path or URL).
    Plan {
        /// The job file (pipelines/*.toml).
        job: PathBuf,
        /// Where to write the plan (path or URL; create-only: an identical plan is accepted).
        #[arg(long)]
        out: String,
        /// Raw bytes (4 per sample) a shard aims at.
        #[arg(long, default_value_t = DEFAULT_SHARD_BYTES)]
        shard_bytes: u64,
        /// Print a JSON summary on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Check every part of a plan against its digest and write the manifest, once.
    Commit {
        /// The plan (path or URL).
        plan: String,
        /// Print a JSON summary on stdout.
        #[arg(long)]
        json: bool,
    },
    /// Run a pipeline file (pipelines/*.toml), or shards of a plan (PLAN.json).
    Run {
        /// The pipeline file, or a plan (path or URL).
        pipeline: PathBuf,
        /// Plans only: do shards I, I+N, I+2N, … (0-based).
        #[arg(long, conflicts_with = "shard_id")]
        shard: Option<Selection>,
        /// Plans only: do the shard with this id.
        #[arg(long)]
        shard_id: Option<String>,
        /// Print the run report as JSON on stdout.
        #[arg(long)]
        json: bool,
        /// Also write the run's report as one self-contained HTML page.
        #[arg(long)]
        report: Option<PathBuf>,
    },
    /// Write one self-contained HTML page about archives: per channel ratio, bytes, error
    /// over budget, order and fundamental over time, events and guards.
    Report {
        /// The archives.
        #[arg(required = true)]
        archives: Vec<PathBuf>,
        /// The HTML page to write.
        #[arg(long)]
        out: PathBuf,
    },
}

/// How a source is read and its fundamental found: the flags `encode` and `survey` share.
#[derive(Args)]
struct ReadingArgs {
    /// Fundamental frequency in Hz (used as is, no tracking).
    #[arg(long, conflicts_with = "fundamental")]
    fundamental_hz: Option<f64>,
    /// `auto` (estimate and track; the default) or `none` (fixed-length segments).
    #[arg(long)]
    fundamental: Option<String>,
    /// Source layout (default: detected).
    #[arg(long, value_enum)]
    layout: Option<Layout>,
    /// Time column (default `time`).
    #[arg(long)]
    time_column: Option<String>,
    /// Channel column, long layout (default `channel`).
    #[arg(long)]
    channel_column: Option<String>,
    /// Value column, long layout (default `value`).
    #[arg(long)]
    value_column: Option<String>,
    /// Only these channels (comma-separated).
    #[arg(long, value_delimiter = ',')]
    channels: Option<Vec<String>>,
    /// Sample rate in Hz (default: from the timestamps' median step).
    #[arg(long)]
    sample_rate_hz: Option<f64>,
}

impl ReadingArgs {
    /// `o` with these flags set in it.
    fn fill(&self, o: EncodeOptions) -> EncodeOptions {
        EncodeOptions {
            fundamental: self
                .fundamental_hz
                .map(|f| f.to_string())
                .or_else(|| self.fundamental.clone()),
            layout: self.layout,
            time_column: self.time_column.clone(),
            channel_column: self.channel_column.clone(),
            value_column: self.value_column.clone(),
            channels: self.channels.clone(),
            sample_rate_hz: self.sample_rate_hz,
            ..o
        }
    }
}

#[derive(Args)]
struct SurveyArgs {
    /// The Parquet source.
    source: PathBuf,
    #[command(flatten)]
    reading: ReadingArgs,
    /// Print JSON on stdout instead of the table.
    #[arg(long)]
    json: bool,
    /// Also write an SVG chart of the curves, noise floors and recommendations marked.
    #[arg(long)]
    svg: Option<PathBuf>,
}

#[derive(Args)]
struct EncodeArgs {
    /// The Parquet source.
    source: PathBuf,
    /// The archive to write.
    #[arg(long)]
    out: PathBuf,
    /// Absolute RMS budget per segment, in the channel's units (0 = lossless).
    #[arg(long, conflicts_with = "budget_rel", allow_negative_numbers = true)]
    budget_rms: Option<f64>,
    /// Relative budget: a fraction of each segment's RMS (default 0.005).
    #[arg(long, allow_negative_numbers = true)]
    budget_rel: Option<f64>,
    /// Absolute floor under a relative budget (channel units; default 0).
    #[arg(long, requires = "budget_rel", allow_negative_numbers = true)]
    budget_floor: Option<f64>,
    /// `survey`: each channel's budget is what `cyclarc survey` recommends for it, measured
    /// on this source first and recorded in the archive.
    #[arg(long, value_enum, conflicts_with_all = ["budget_rms", "budget_rel"])]
    budget: Option<BudgetChoice>,
    /// Peak guard: no decoded sample may differ from its source value by more than this
    /// (channel units); samples that would are corrected, and `verify` checks it.
    #[arg(long, allow_negative_numbers = true)]
    peak_max: Option<f64>,
    /// Protected bands in Hz, `CENTRE[:HALF_WIDTH],…`: their bins keep their amplitude
    /// within 1 % (or --protect-floor) whatever the budget.
    #[arg(long)]
    protect_hz: Option<String>,
    /// Protected bands in orders of the tracked fundamental, `CENTRE[:HALF_WIDTH],…`.
    #[arg(long)]
    protect_orders: Option<String>,
    /// Protect a bearing's defect orders (FTF, BPFO, BPFI, BSF, each ±2 %):
    /// `ELEMENTS,BALL_DIAMETER,PITCH_DIAMETER[,CONTACT_ANGLE_DEG]`.
    #[arg(long)]
    protect_bearing: Option<String>,
    /// Protect rotor-bar sidebands (1 ± 2s)·f (±0.5 Hz): `LINE_HZ,SLIP`.
    #[arg(long)]
    protect_rotor_bars: Option<String>,
    /// Event capture: mark segments whose crest factor, kurtosis or RMS jumps against the
    /// segments before them, and code them at a tenth of the budget.
    #[arg(long)]
    events: bool,
    /// Amplitude floor of protected bins (channel units; default 0).
    #[arg(long)]
    protect_floor: Option<f64>,
    /// Whole cycles per segment (default: fewest spanning 200 ms).
    #[arg(long)]
    cycles_per_segment: Option<u32>,
    #[command(flatten)]
    reading: ReadingArgs,
    /// zstd level for blocks, 1–22 (default 19).
    #[arg(long)]
    zstd_level: Option<i32>,
    /// Print a JSON summary on stdout.
    #[arg(long)]
    json: bool,
}

impl EncodeArgs {
    fn protect(&self) -> Result<Option<ProtectSpec>, Error> {
        let nums = |flag: &str, v: &str, min: usize, max: usize| -> Result<Vec<f64>, Error> {
            let parts: Vec<f64> = v
                .split(',')
                .map(|p| p.trim().parse::<f64>())
                .collect::<Result<_, _>>()
                .map_err(|_| Error::InvalidOption {
                    name: flag.into(),
                    reason: format!("`{v}` is not a list of numbers"),
                })?;
            if !(min..=max).contains(&parts.len()) {
                return Err(Error::InvalidOption {
                    name: flag.into(),
                    reason: format!("`{v}`: expected {min} to {max} numbers"),
                });
            }
            Ok(parts)
        };
        let bearing = match &self.protect_bearing {
            None => None,
            Some(v) => {
                let n = nums("protect-bearing", v, 3, 4)?;
                if !(n[0] >= 1.0 && n[0].fract() == 0.0 && n[0] <= u32::MAX as f64) {
                    return Err(Error::InvalidOption {
                        name: "protect-bearing".into(),
                        reason: format!("`{v}`: the element count must be a whole number ≥ 1"),
                    });
                }
                Some(BearingSpec {
                    elements: n[0] as u32,
                    ball_diameter: n[1],
                    pitch_diameter: n[2],
                    contact_angle_deg: n.get(3).copied().unwrap_or(0.0),
                    slip: None,
                })
            }
        };
        let rotor_bars = match &self.protect_rotor_bars {
            None => None,
            Some(v) => {
                let n = nums("protect-rotor-bars", v, 2, 2)?;
                Some(RotorBarSpec {
                    line_hz: n[0],
                    slip: n[1],
                    pairs: None,
                    half_width_hz: None,
                })
            }
        };
        let spec = ProtectSpec {
            channels: None,
            hz: self.protect_hz.clone(),
            orders: self.protect_orders.clone(),
            floor: self.protect_floor,
            bearing,
            rotor_bars,
        };
        Ok((spec != ProtectSpec::default()).then_some(spec))
    }

    fn options(&self) -> Result<EncodeOptions, Error> {
        Ok(self.reading.fill(EncodeOptions {
            budget_rms: self.budget_rms,
            budget_rel: self.budget_rel,
            budget_floor: self.budget_floor,
            budget: self.budget,
            peak_max: self.peak_max,
            protect: self.protect()?,
            events: self.events.then_some(true),
            cycles_per_segment: self.cycles_per_segment,
            zstd_level: self.zstd_level,
            ..Default::default()
        }))
    }
}

fn parse_time(s: &str, flag: &str) -> Result<i64, Error> {
    if let Ok(ns) = s.trim().parse::<i64>() {
        return Ok(ns);
    }
    arrow::compute::kernels::cast_utils::string_to_timestamp_nanos(s.trim()).map_err(|e| {
        Error::InvalidOption {
            name: flag.into(),
            reason: format!("`{s}` is not an RFC 3339 time or integer ns: {e}"),
        }
    })
}

/// Write to stdout. A reader that went away (a closed pipe, as with `| head`) only loses the
/// report: the work is done, so that is not an error (and never a panic, as `print!` would).
fn stdout(text: &str) {
    use std::io::Write;
    let mut o = std::io::stdout().lock();
    let _ = o.write_all(text.as_bytes()).and_then(|()| o.flush());
}

/// The argument as a plan's path or URL, when it names a plan (`*.json`).
fn plan_arg(p: &std::path::Path) -> Option<String> {
    let text = p.to_string_lossy().into_owned();
    is_plan(&text).then_some(text)
}

/// `verify PLAN`: every part against its own source (fetched when remote).
fn verify_plan(text: &str, source: Option<&std::path::Path>, json: bool) -> Result<i32, Error> {
    if source.is_some() {
        return Err(Error::InvalidOption {
            name: "source".into(),
            reason: "a plan names each part's source; give no --source".into(),
        });
    }
    let c = plan::open_committed(text)?;
    let tmp = tempfile::tempdir().map_err(|e| Error::Write {
        file: std::env::temp_dir(),
        source: e,
    })?;
    let mut reports = Vec::new();
    for (shard, part) in &c.parts {
        let src = cyclarc::store::Location::parse(&shard.source.location)?.fetch(tmp.path())?;
        let r = cyclarc::verify(part, &src, RealFft::shared())?;
        if !json {
            stdout(&format!("shard {}:\n{}", shard.id, report::verify_text(&r)));
        }
        reports.push(r);
    }
    let pass = reports.iter().all(|r| r.passed());
    if json {
        print_json(&reports);
    } else {
        stdout(&format!(
            "{text}: {} part(s), {}\n",
            reports.len(),
            if pass { "all pass" } else { "FAIL" }
        ));
    }
    Ok(if pass { 0 } else { 1 })
}

/// Write a text output (SVG, HTML) atomically.
fn write_text(path: &std::path::Path, text: &str) -> Result<(), Error> {
    use std::io::Write;
    cyclarc::fsio::write_atomic(path, |f| {
        f.write_all(text.as_bytes()).map_err(|e| Error::Write {
            file: path.to_path_buf(),
            source: e,
        })
    })
}

fn print_json<T: serde::Serialize>(v: &T) {
    match serde_json::to_string_pretty(v) {
        Ok(s) => stdout(&format!("{s}\n")),
        Err(e) => eprintln!("cyclarc: cannot render JSON: {e}"),
    }
}

fn run(cli: Cli) -> Result<i32, Error> {
    let control = JobControl { progress: true };
    match cli.command {
        Command::Encode(a) => {
            let settings = a.options()?.resolve()?;
            let s = encode_file(&a.source, &a.out, &settings, &control)?;
            if a.json {
                print_json(&s);
            } else {
                eprint!("{}", report::encode_text(&s));
            }
            Ok(0)
        }
        Command::Decode {
            archive,
            out,
            channels,
            from,
            to,
            salvage,
            json,
        } => {
            let from = from.map(|s| parse_time(&s, "from")).transpose()?;
            let to = to.map(|s| parse_time(&s, "to")).transpose()?;
            let s = match plan_arg(&archive) {
                Some(text) => {
                    if salvage {
                        return Err(Error::InvalidOption {
                            name: "salvage".into(),
                            reason: "decodes one archive: decode the part it names".into(),
                        });
                    }
                    let c = plan::open_committed(&text)?;
                    let parts: Vec<PathBuf> = c.parts.iter().map(|p| p.1.clone()).collect();
                    cyclarc::jobs::decode::decode_parts(&text, &parts, &out, &channels, from, to)?
                }
                None => decode_file(&archive, &out, &channels, from, to, salvage)?,
            };
            for h in &s.holes {
                eprintln!("cyclarc: {}: hole: {h}", s.archive.display());
            }
            if json {
                print_json(&s);
            } else {
                eprintln!(
                    "{} → {}: {} rows, {} channels",
                    s.archive.display(),
                    s.out.display(),
                    s.rows,
                    s.channels
                );
            }
            Ok(if s.holes.is_empty() { 0 } else { 1 })
        }
        Command::Verify {
            archive,
            source,
            json,
        } => {
            if let Some(text) = plan_arg(&archive) {
                return verify_plan(&text, source.as_deref(), json);
            }
            let Some(source) = source else {
                return Err(Error::InvalidOption {
                    name: "source".into(),
                    reason: "verify needs the source the archive was made from".into(),
                });
            };
            let r = cyclarc::verify(&archive, &source, RealFft::shared())?;
            if json {
                print_json(&r);
            } else {
                stdout(&report::verify_text(&r));
            }
            Ok(if r.passed() { 0 } else { 1 })
        }
        Command::Inspect {
            archive,
            json,
            segments,
            meta,
        } => {
            let i = match plan_arg(&archive) {
                Some(text) => {
                    let c = plan::open_committed(&text)?;
                    if meta {
                        print_json(&c.plan);
                        return Ok(0);
                    }
                    let mut each = Vec::new();
                    for (_, p) in &c.parts {
                        let a = Archive::open(p, DigestPolicy::Skip)?;
                        each.push(report::inspect(&a, segment_list(&a)?, segments));
                    }
                    report::inspect_union(each)
                }
                None => {
                    let a = Archive::open(&archive, DigestPolicy::Skip)?;
                    if meta {
                        print_json(&a.meta);
                        return Ok(0);
                    }
                    report::inspect(&a, segment_list(&a)?, segments)
                }
            };
            if json {
                print_json(&i);
            } else {
                stdout(&report::inspect_text(&i));
            }
            Ok(0)
        }
        Command::Survey(a) => {
            let settings = a.reading.fill(EncodeOptions::default()).resolve()?;
            let r = survey(&a.source, &settings)?;
            if let Some(p) = &a.svg {
                write_text(p, &plot::panels_svg(&report::survey_panels(&r)))?;
            }
            if a.json {
                print_json(&r);
            } else {
                stdout(&report::survey_text(&r));
            }
            Ok(0)
        }
        Command::Trend {
            archive,
            channels,
            from,
            to,
            harmonics,
            csv,
            json,
            parquet,
            svg,
        } => {
            let query = TrendQuery {
                channels,
                from: from.map(|s| parse_time(&s, "from")).transpose()?,
                to: to.map(|s| parse_time(&s, "to")).transpose()?,
                harmonics,
            };
            let r = match plan_arg(&archive) {
                Some(text) => {
                    let c = plan::open_committed(&text)?;
                    let archives = c
                        .parts
                        .iter()
                        .map(|(_, p)| Archive::open(p, DigestPolicy::Skip))
                        .collect::<Result<Vec<_>, Error>>()?;
                    trend_union(&text, &archives, &query, RealFft::shared())?
                }
                None => {
                    let a = Archive::open(&archive, DigestPolicy::Skip)?;
                    trend(&a, &query, RealFft::shared())?
                }
            };
            if let Some(p) = &parquet {
                cyclarc::source::writeback::write_table(p, trend_columns(&r))?;
            }
            if let Some(p) = &svg {
                write_text(p, &plot::panels_svg(&report::trend_panels(&r)))?;
            }
            if json {
                print_json(&r);
            } else if csv {
                stdout(&report::trend_csv(&r));
            } else {
                stdout(&report::trend_text(&r));
            }
            Ok(0)
        }
        Command::Report { archives, out } => {
            let title = if archives.len() == 1 {
                archives[0].display().to_string()
            } else {
                format!("{} archives", archives.len())
            };
            write_text(&out, &cyclarc::html::page(&title, &archives, &[])?)?;
            eprintln!("report written to {}", out.display());
            Ok(0)
        }
        Command::Plan {
            job,
            out,
            shard_bytes,
            json,
        } => {
            let s = plan::make_plan(&job, &out, shard_bytes)?;
            if json {
                print_json(&s);
            } else {
                eprintln!(
                    "{}: {} shard(s) of {} source(s), {} raw; plan {}{}; parts go to {}",
                    job.display(),
                    s.shards,
                    s.sources,
                    report::bytes(s.raw_bytes),
                    s.hash,
                    if s.existed {
                        " (already there, identical)"
                    } else {
                        ""
                    },
                    s.parts
                );
            }
            Ok(0)
        }
        Command::Commit { plan: text, json } => {
            let c = plan::commit(&text)?;
            if json {
                print_json(&c);
            } else if c.written {
                eprintln!(
                    "{text}: committed {} part(s), {}; manifest {}",
                    c.parts,
                    report::bytes(c.bytes),
                    c.manifest
                );
            } else {
                eprintln!(
                    "{text}: already committed ({}); nothing changed",
                    c.manifest
                );
            }
            Ok(0)
        }
        Command::Run {
            pipeline,
            shard,
            shard_id,
            json,
            report: page,
        } => {
            if let Some(text) = plan_arg(&pipeline) {
                let selection = match (shard, shard_id) {
                    (Some(s), _) => s,
                    (None, Some(id)) => Selection::Id(id),
                    (None, None) => Selection::All,
                };
                let r = plan::run_plan(&text, &selection, &control)?;
                if json {
                    print_json(&r);
                }
                for s in &r.shards {
                    match s {
                        ShardOutcome::Done {
                            id,
                            bytes,
                            samples,
                            seconds,
                        } => eprintln!(
                            "shard {id}: {samples} rows → {} in {seconds:.2} s",
                            report::bytes(*bytes)
                        ),
                        ShardOutcome::Present { id } => {
                            eprintln!("shard {id}: its part is there and matches its digest")
                        }
                        ShardOutcome::Failed { id, error, code } => {
                            eprintln!("cyclarc: shard {id}: {error} (exit {code})")
                        }
                    }
                }
                return Ok(r.exit_code());
            }
            if shard.is_some() || shard_id.is_some() {
                return Err(Error::InvalidOption {
                    name: "shard".into(),
                    reason: "shards are of plans (PLAN.json), not of pipeline files".into(),
                });
            }
            let r = pipeline::run(&pipeline, &control)?;
            if let Some(p) = &page {
                write_text(p, &cyclarc::html::run_page(&r)?)?;
                eprintln!("report written to {}", p.display());
            }
            if json {
                print_json(&r);
            }
            for s in &r.sources {
                match s {
                    pipeline::SourceOutcome::Archived {
                        summary, verified, ..
                    } => {
                        eprint!("{}", report::encode_text(summary));
                        if verified.is_some() {
                            eprintln!("  verify: pass");
                        }
                    }
                    pipeline::SourceOutcome::Skipped { source, archive } => eprintln!(
                        "{}: already archived as {} with the same settings; skipped",
                        source.display(),
                        archive.display()
                    ),
                    pipeline::SourceOutcome::Failed { error, .. } => {
                        eprintln!("cyclarc: {error}")
                    }
                }
            }
            Ok(r.exit_code())
        }
    }
}

fn main() -> ExitCode {
    let cli = Cli::parse();
    // The parquet reader panics on some damaged files; those panics become errors that name
    // the file, and print nothing else.
    cyclarc::fsio::quiet_contained_panics();
    if let Err(e) = cyclarc::stop::install() {
        eprintln!("cyclarc: cannot install the SIGTERM handler: {e}");
    }
    if let Some(n) = cli.threads {
        if let Err(e) = rayon::ThreadPoolBuilder::new()
            .num_threads(n.max(1))
            .build_global()
        {
            eprintln!("cyclarc: cannot set up {n} threads: {e}");
            return ExitCode::from(2);
        }
    }
    match run(cli) {
        Ok(code) => ExitCode::from(code as u8),
        Err(e) => {
            eprintln!("cyclarc: {e}");
            ExitCode::from(e.exit_code() as u8)
        }
    }
}
