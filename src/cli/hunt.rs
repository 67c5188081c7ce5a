//! `tracewalk hunt`.

use std::io::IsTerminal;
use std::path::PathBuf;
use std::time::Duration;

use tracewalk::generate::Generator;
use tracewalk::harness::oracle::describe;
use tracewalk::harness::{Failure, Target, interrupt_flag};
use tracewalk::hunt::{self, Finding, HuntOptions, ModelSource, Observer, Progress, Store, Summary};
use tracewalk::shrink::ShrinkOptions;

use super::target::TargetArgs;
use super::walk_args::WalkArgs;

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    #[command(flatten)]
    target: TargetArgs,
    #[command(flatten)]
    walk: WalkArgs,
    /// Stop after this many runs in all (runs of earlier sessions on the directory count).
    #[arg(long, value_name = "RUNS", required_unless_present = "time")]
    budget: Option<u64>,
    /// Stop after this much time, e.g. 60s or 5m.
    #[arg(long, value_name = "DURATION", value_parser = super::parse_duration_ms)]
    time: Option<u64>,
    /// Seed; the same model, seed, options and budget give the same findings.
    #[arg(long, default_value_t = 0)]
    seed: u64,
    /// Campaign directory: findings go here; rerunning on it resumes.
    #[arg(short, long, value_name = "DIR")]
    output: PathBuf,
    /// Targets run in parallel (the findings are the same as with one).
    #[arg(long, default_value_t = 1)]
    jobs: usize,
    /// Most target runs spent shrinking one finding.
    #[arg(long, default_value_t = 2000, value_name = "RUNS")]
    shrink_runs: usize,
    /// Store findings as found, without shrinking.
    #[arg(long)]
    no_shrink: bool,
    /// Reruns a new failure must fail again to count as reproducible (else it is flaky); each
    /// failing candidate while shrinking is rerun as often.
    #[arg(long, default_value_t = 1)]
    confirm: u32,
    /// Print one JSON object at the end instead of the summary.
    #[arg(long)]
    json: bool,
    /// Leave the shrunk traces out of the summary.
    #[arg(long)]
    brief: bool,
}

struct Console {
    bar: Option<indicatif::ProgressBar>,
}

impl Console {
    fn say(&self, line: String) {
        match &self.bar {
            Some(b) => b.println(line),
            None => eprintln!("{line}"),
        }
    }
}

impl Observer for Console {
    fn progress(&mut self, p: &Progress) {
        if let Some(bar) = &self.bar {
            bar.set_position(p.runs);
            let coverage = p.coverage.map(|(c, l)| format!(", transitions {c}/{l}")).unwrap_or_default();
            bar.set_message(format!("findings {}{coverage}", p.findings));
        }
    }

    fn shrinking(&mut self, failure: &Failure, run: u64) {
        self.say(format!("run {run}: new failure: {}", describe(failure)));
    }

    fn found(&mut self, f: &Finding) {
        let what = match (&f.shrunk, f.flaky) {
            (_, true) => "flaky (did not fail again on a rerun), not shrunk".to_string(),
            (Some(t), false) => format!(
                "shrunk {} → {} messages in {} runs",
                f.original_messages,
                t.wire_messages(),
                f.shrink_runs
            ),
            (None, false) => "not shrunk".to_string(),
        };
        let place = f.dir.as_ref().map(|d| format!("; stored in {}", d.display())).unwrap_or_default();
        self.say(format!("  {what}{place}"));
    }
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    anyhow::ensure!(a.jobs >= 1, "--jobs must be at least 1");
    anyhow::ensure!(a.budget.is_none_or(|b| b >= 1), "--budget must be at least 1");
    let compiled = super::load_compiled(&a.model)?;
    let format = compiled.tokenizer.format();
    let spec = a.target.spec(format)?;
    let mut targets: Vec<Box<dyn Target + Send>> =
        (0..a.jobs).map(|job| spec.build(job)).collect::<Result<_, _>>()?;
    let options = a.walk.options()?;
    let generator = Generator::new(&compiled, options)?;
    let live = !a.walk.no_flow && !compiled.flow.is_empty() && targets[0].replies();
    let mut source = ModelSource::new(generator, a.seed).with_live_replies(live);
    let identity = tracewalk::hunt::TraceSource::identity(&source);
    let (store, resume) = Store::open(&a.output, &identity, &targets[0].describe())?;
    let stop = interrupt_flag();
    let program =
        std::env::current_exe().map(|p| p.display().to_string()).unwrap_or_else(|_| "tracewalk".into());
    let hunt_options = HuntOptions {
        runs: a.budget,
        time: a.time.map(Duration::from_millis),
        shrink: (!a.no_shrink).then(|| ShrinkOptions { max_calls: a.shrink_runs, stop: Some(stop.clone()) }),
        confirm: a.confirm,
        stop: Some(stop),
        replay: Some((program, a.target.replay_args(format))),
    };
    let bar = std::io::stderr().is_terminal().then(|| {
        let bar = match a.budget {
            Some(b) => indicatif::ProgressBar::new(b),
            None => indicatif::ProgressBar::new_spinner(),
        };
        bar.set_style(
            indicatif::ProgressStyle::with_template(
                "{elapsed_precise} [{bar:30}] {pos}/{len} runs, {per_sec}, {msg}",
            )
            .expect("valid template")
            .progress_chars("=> "),
        );
        bar.set_position(resume.runs);
        bar.reset_eta();
        bar
    });
    if resume.runs > 0 {
        eprintln!(
            "resuming the campaign in {} after {} runs ({} findings so far)",
            a.output.display(),
            resume.runs,
            resume.findings.len()
        );
    }
    let mut console = Console { bar };
    let result = hunt::hunt(&mut source, &mut targets, Some(&store), resume, &hunt_options, &mut console);
    if let Some(b) = &console.bar {
        b.finish_and_clear();
    }
    let summary = result?;
    if a.json {
        println!("{}", json_summary(&summary, &a.output));
    } else {
        print_summary(&summary, &a.output, a.brief);
    }
    Ok(if summary.findings.is_empty() { 0 } else { 1 })
}

fn json_summary(s: &Summary, dir: &std::path::Path) -> serde_json::Value {
    let findings: Vec<serde_json::Value> = s
        .findings
        .iter()
        .map(|f| {
            serde_json::json!({
                "signature": f.signature(),
                "kind": f.failure.kind,
                "detail": f.failure.detail,
                "first_run": f.first_run,
                "hits": f.hits,
                "flaky": f.flaky,
                "original": f.original_path().map(|p| p.display().to_string()),
                "shrunk": f.shrunk_path().map(|p| p.display().to_string()),
                "original_messages": f.original_messages,
                "shrunk_messages": f.shrunk.as_ref().map(|t| t.wire_messages()),
                "shrink_runs": f.shrink_runs,
            })
        })
        .collect();
    let p = &s.progress;
    serde_json::json!({
        "directory": dir.display().to_string(),
        "runs": p.runs,
        "session_runs": p.session_runs,
        "resumed_from": s.resumed_from,
        "stopped_by": s.stop.name(),
        "elapsed_seconds": (p.elapsed.as_secs_f64() * 1000.0).round() / 1000.0,
        "transitions_covered": p.coverage.map(|c| c.0),
        "transitions_learned": p.coverage.map(|c| c.1),
        "findings": findings,
    })
}

fn print_summary(s: &Summary, dir: &std::path::Path, brief: bool) {
    let p = &s.progress;
    let rate = p.session_runs as f64 / p.elapsed.as_secs_f64().max(1e-9);
    let coverage = p.coverage.map(|(c, l)| format!("; transitions covered {c}/{l}")).unwrap_or_default();
    let how = match s.stop {
        hunt::StopReason::Interrupted => " (interrupted; rerun the same command to resume)",
        _ => "",
    };
    println!(
        "{} runs ({} in this session) in {:.1} s, {:.0} runs/s{coverage}{how}",
        p.runs,
        p.session_runs,
        p.elapsed.as_secs_f64(),
        rate
    );
    if s.findings.is_empty() {
        println!("no failures found; campaign directory {}", dir.display());
        return;
    }
    println!(
        "{} finding{} in {}:",
        s.findings.len(),
        if s.findings.len() == 1 { "" } else { "s" },
        dir.display()
    );
    for (i, f) in s.findings.iter().enumerate() {
        println!();
        println!("{}. {}", i + 1, f.signature());
        if !f.failure.detail.is_empty() && !f.signature().contains(&f.failure.detail) {
            println!("   {}", f.failure.detail);
        }
        let shrunk = match (&f.shrunk, f.flaky) {
            (_, true) => "flaky: did not fail again on a rerun".to_string(),
            (Some(t), _) => format!(
                "shrunk from {} to {} messages in {} runs",
                f.original_messages,
                t.wire_messages(),
                f.shrink_runs
            ),
            (None, _) => format!("{} messages, not shrunk", f.original_messages),
        };
        println!(
            "   first at run {}, {} run{} in all; {shrunk}",
            f.first_run,
            f.hits,
            if f.hits == 1 { "" } else { "s" }
        );
        if let Some(d) = &f.dir {
            println!("   replay: sh {}", d.join("replay.sh").display());
        }
        if let (false, Some(t)) = (brief, &f.shrunk) {
            if let Some(path) = f.shrunk_path() {
                println!("   {}:", path.display());
            }
            for line in t.to_text().lines() {
                println!("     {line}");
            }
        }
    }
}
