//! `tracewalk score`.

use std::path::PathBuf;

use tracewalk::escape;
use tracewalk::read;
use tracewalk::score::score_corpus;

#[derive(Debug, clap::Args)]
pub struct Args {
    /// The model file.
    model: PathBuf,
    /// Traffic to score (read with the model's read options).
    #[arg(required = true)]
    inputs: Vec<PathBuf>,
    /// Flag messages whose surprise exceeds this many bits (10 bits ≈ 1 in 1024).
    #[arg(long, default_value_t = 10.0, value_name = "BITS")]
    flag_above: f64,
    /// Print only flagged messages.
    #[arg(long)]
    flagged_only: bool,
    /// Print one JSON object per message (JSON lines).
    #[arg(long)]
    json: bool,
}

pub fn run(a: Args) -> anyhow::Result<i32> {
    let model = super::load_compiled(&a.model)?;
    let corpus = read::read_paths(&a.inputs, &model.settings.read)?;
    let scores = score_corpus(&model, &corpus);
    let mut flagged = 0usize;
    let mut last_session = usize::MAX;
    for s in &scores {
        let flag = s.surprise > a.flag_above;
        flagged += usize::from(flag);
        if a.flagged_only && !flag {
            continue;
        }
        let source = corpus.sources[corpus.sessions[s.session].source].path.display().to_string();
        if a.json {
            let row = serde_json::json!({
                "source": source,
                "session": s.session + 1,
                "message": s.index + 1,
                "surprise_bits": s.surprise,
                "flagged": flag,
                "known_template": s.known_template,
                "text": escape::escape(read::trim_line_end(&s.bytes)),
            });
            println!("{row}");
            continue;
        }
        if s.session != last_session {
            println!("session {} ({source})", s.session + 1);
            last_session = s.session;
        }
        let first_line = s.bytes.split(|&b| b == b'\n').next().unwrap_or(b"");
        println!(
            "  {:>4} {:>8.2} bits {} {}{}",
            s.index + 1,
            s.surprise,
            if flag { "!" } else { " " },
            escape::preview(read::trim_line_end(first_line), 100),
            if s.known_template { "" } else { "   [new template]" }
        );
    }
    if !a.json {
        let mean = scores.iter().map(|s| s.surprise).sum::<f64>() / scores.len().max(1) as f64;
        println!(
            "{} messages, mean {:.2} bits, {} flagged above {} bits",
            scores.len(),
            mean,
            flagged,
            a.flag_above
        );
    }
    Ok(0)
}
