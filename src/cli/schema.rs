//! `slackmap schema`: the JSON Schemas of the JSON files slackmap writes, generated from the
//! types that write them.

use std::io::Write;
use std::path::PathBuf;

use anyhow::Context;
use slackmap::report::schema::Document;

const HELP: &str = "Examples:
  slackmap schema audit > audit.schema.json      # one schema on stdout
  slackmap schema all --out schemas              # schemas/audit.schema.json, compare..., hints...,
                                                 # hints-compare..., plan.schema.json

The schemas (JSON Schema draft 2020-12) are generated from the types that write the files, so
they always match this version. Numbers without a finite value are written as the words
\"unbounded\" (no finite bound: a pair no circuit tested) and \"not-identified\" (the data do not
determine it); the CSV files leave such cells empty.

Exit codes: 0 success, 2 bad usage.";

/// Arguments of `slackmap schema`.
#[derive(clap::Args, Debug)]
#[command(after_help = HELP)]
pub struct SchemaArgs {
    /// Which schema: audit, compare, hints, hints-compare, plan, or all (needs --out).
    #[arg(value_name = "NAME", value_parser = ["audit", "compare", "hints", "hints-compare", "plan", "all"])]
    name: String,
    /// Write NAME.schema.json files into this folder instead of printing.
    #[arg(long, value_name = "DIR")]
    out: Option<PathBuf>,
}

/// Runs `slackmap schema`.
pub fn run(args: SchemaArgs) -> anyhow::Result<()> {
    let docs: Vec<Document> = match args.name.as_str() {
        "all" => Document::ALL.to_vec(),
        name => vec![Document::from_name(name).context("unknown schema name")?],
    };
    match &args.out {
        Some(dir) => {
            let files: Vec<(String, Vec<u8>)> =
                docs.iter().map(|d| (d.file_name(), d.schema_bytes())).collect();
            slackmap::report::write_folder(dir, &files)
                .with_context(|| format!("writing the schemas into {}", dir.display()))?;
            for (name, _) in &files {
                println!("{}", dir.join(name).display());
            }
        }
        None if docs.len() == 1 => std::io::stdout().lock().write_all(&docs[0].schema_bytes())?,
        None => anyhow::bail!(slackmap::Error::Usage(
            "`schema all` writes several files: give --out DIR, or name one schema".into()
        )),
    }
    Ok(())
}
