//! `ampchain schema`: print the JSON Schema of chain files (draft 2020-12), generated
//! from the types that read them (`ampchain::schema`).

use ampchain::error::Error;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct SchemaArgs {
    #[command(flatten)]
    out: super::ReportOutput,
}

pub fn run(args: &SchemaArgs) -> Result<ExitCode, Error> {
    let mut text = serde_json::to_string_pretty(&ampchain::schema::chain_schema())
        .expect("a schema is plain JSON");
    text.push('\n');
    args.out.emit(text.as_bytes(), &[])?;
    Ok(ExitCode::SUCCESS)
}
