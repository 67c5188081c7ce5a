//! `tracewalk gen`.

use std::io::Write;
use std::path::PathBuf;

use tracewalk::generate::report::ReportBuilder;
use tracewalk::generate::{GenOptions, Generator, Mode};

use super::walk_args::WalkArgs;

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    /// Number of traces (tour mode and --best decide their own number).
    #[arg(short = 'n', long, default_value_t = 10)]
    count: u64,
    /// Seed; the same model, seed and options give byte-identical output.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    #[command(flatten)]
    walk: WalkArgs,
    /// Visit this template (its text as `show` prints it, a message, or text that template texts
    /// contain); repeat for several, in order. Sessions are drawn from the chain conditioned on it.
    #[arg(long, value_name = "TEMPLATE")]
    through: Vec<String>,
    /// With --through: print the single most probable such session.
    #[arg(long)]
    best: bool,
    /// Show the replies the model expects after each request, marked `reply` (never sent; with
    /// --raw they are written too, as a two-sided capture).
    #[arg(long)]
    replies: bool,
    /// Print a report on the batch to standard error: well-formed fraction, new templates,
    /// transitions covered, surprise.
    #[arg(long)]
    report: bool,
    /// Write one file per trace into this directory instead of standard output.
    #[arg(short, long, value_name = "DIR")]
    output: Option<PathBuf>,
    /// Write wire bytes instead of annotated trace text.
    #[arg(long)]
    raw: bool,
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    let model = super::load_compiled(&a.model)?;
    let options =
        GenOptions { through: a.through.clone(), best: a.best, replies: a.replies, ..a.walk.options()? };
    let mut generator = Generator::new(&model, options)?;
    if let Some(dir) = &a.output {
        std::fs::create_dir_all(dir).map_err(|e| anyhow::anyhow!("{}: cannot create: {e}", dir.display()))?;
    }
    let count = generator.batch_size(a.count);
    let measure = a.report || matches!(a.walk.mode, Mode::Novel | Mode::Frontier | Mode::Tour);
    let mut report = measure.then(|| ReportBuilder::new(&model));
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    let width = count.max(1).to_string().len().max(4);
    for i in 0..count {
        let trace = generator.trace(a.seed, i);
        if let Some(r) = &mut report {
            r.add(&trace);
        }
        let bytes = match (a.raw, a.replies) {
            (true, false) => trace.wire_bytes(),
            (true, true) => trace.conversation_bytes(),
            (false, _) => trace.to_text().into_bytes(),
        };
        match &a.output {
            Some(dir) => {
                let name = format!("{:0width$}.{}", i + 1, if a.raw { "raw" } else { "trace" });
                let path = dir.join(name);
                tracewalk::atomic::write(&path, &bytes)
                    .map_err(|e| anyhow::anyhow!("{}: cannot write: {e}", path.display()))?;
            }
            None => {
                if let Err(e) = out.write_all(&bytes) {
                    if e.kind() == std::io::ErrorKind::BrokenPipe {
                        return Ok(0);
                    }
                    return Err(e.into());
                }
            }
        }
    }
    if let Err(e) = out.flush()
        && e.kind() != std::io::ErrorKind::BrokenPipe
    {
        return Err(e.into());
    }
    if let Some(plan) = generator.waypoints() {
        let what =
            if a.best { "probability of this session" } else { "probability that a session visits them" };
        eprintln!(
            "waypoints: {what} within {} messages: {:.3e} ({} chain contexts)",
            a.walk.max_messages,
            plan.probability(),
            plan.space().len()
        );
    }
    if let Some(tour) = generator.tour() {
        let optimum =
            tour.optimal_steps.map_or("none (some transition cannot end)".to_string(), |s| s.to_string());
        eprintln!(
            "tour: fewest steps any covering set of sessions needs: {optimum}; uncovered within {} messages: {}",
            a.walk.max_messages, tour.uncovered
        );
    }
    let Some(r) = report.map(ReportBuilder::finish) else { return Ok(0) };
    if a.report {
        eprintln!("{r}");
    } else {
        match a.walk.mode {
            Mode::Novel => eprintln!(
                "novel: {} of {} messages have new templates ({:.2}%)",
                r.new_templates,
                r.messages,
                100.0 * r.new_template_fraction()
            ),
            Mode::Frontier => eprintln!(
                "frontier: {} traces covered {} of {} learned transitions ({:.2}%)",
                r.traces,
                r.transitions_covered,
                r.transitions_learned,
                100.0 * r.coverage()
            ),
            Mode::Tour => eprintln!(
                "tour: {} traces, {} messages; {} steps (messages + ends) for {} learned transitions ({:.2}× that lower bound); covered {}",
                r.traces,
                r.messages,
                r.steps,
                r.transitions_learned,
                r.steps as f64 / r.transitions_learned.max(1) as f64,
                r.transitions_covered
            ),
            _ => {}
        }
    }
    Ok(0)
}
