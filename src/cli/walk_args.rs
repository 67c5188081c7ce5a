//! Generation options shared by `gen` and `hunt`.

use std::path::PathBuf;

use tracewalk::generate::{GenOptions, HostileLibrary, Mode};

#[derive(Debug, clap::Args)]
pub struct WalkArgs {
    /// What to generate: plausible, rare, novel, frontier or tour.
    #[arg(long, default_value = "plausible")]
    pub mode: Mode,
    /// Next-step weights become p^(1/T): below 1 sharpens, above 1 flattens.
    #[arg(long, default_value_t = 1.0)]
    temperature: f64,
    /// Rare mode: probability per session step of a forced step into the tail.
    #[arg(long, default_value_t = 0.05, value_name = "R")]
    rare_rate: f64,
    /// Rare mode: at least this many forced steps per trace (0: the plain per-step process).
    #[arg(long, default_value_t = 1, value_name = "N")]
    rare_min: u32,
    /// Rare mode: probability per slot of a hostile value (default: the rare rate).
    #[arg(long, value_name = "R")]
    hostile_rate: Option<f64>,
    /// Rare mode: a YAML file of hostile values added to the built-in ones (`tracewalk rules --hostile`).
    #[arg(long, value_name = "FILE")]
    hostile: Option<PathBuf>,
    /// Rare mode: no hostile values, only forced steps.
    #[arg(long, conflicts_with = "hostile")]
    no_hostile: bool,
    /// Fill every slot from its pool independently instead of reproducing the learned value flow
    /// (which slots reuse values that earlier messages or replies issued). With flow on, a hunt
    /// on a target that replies message by message (--per-message, --tcp) copies the values
    /// the target returned.
    #[arg(long)]
    pub no_flow: bool,
    /// Rare mode: probability per copied slot of breaking the coupling (default: the rare rate).
    #[arg(long, value_name = "R")]
    flow_break_rate: Option<f64>,
    /// Longest trace in messages (also the length bound for --through and tour sessions).
    #[arg(long, default_value_t = 200)]
    pub max_messages: usize,
}

impl WalkArgs {
    /// The generator's options (the hostile values file read and checked here).
    pub fn options(&self) -> anyhow::Result<GenOptions> {
        let hostile = if self.no_hostile {
            None
        } else if let Some(path) = &self.hostile {
            let text = std::fs::read_to_string(path)
                .map_err(|e| anyhow::anyhow!("{}: cannot read: {e}", path.display()))?;
            Some(std::sync::Arc::new(HostileLibrary::from_yaml(&text, &path.display().to_string())?))
        } else {
            Some(HostileLibrary::builtin())
        };
        Ok(GenOptions {
            mode: self.mode,
            temperature: self.temperature,
            max_messages: self.max_messages,
            rare_rate: self.rare_rate,
            rare_min: self.rare_min,
            hostile_rate: self.hostile_rate,
            hostile,
            flow: !self.no_flow,
            flow_break_rate: self.flow_break_rate,
            ..GenOptions::default()
        })
    }
}
