//! `ampchain schema`: print the JSON Schema of chain files (draft 2020-12), generated
//! from the types that read them (`ampchain::schema`).

use super::print;
use ampchain::error::Error;
use std::process::ExitCode;

#[derive(clap::Args)]
pub struct SchemaArgs {}

pub fn run(_: &SchemaArgs) -> Result<ExitCode, Error> {
    let mut text = serde_json::to_string_pretty(&ampchain::schema::chain_schema())
        .expect("a schema is plain JSON");
    text.push('\n');
    print(text.as_bytes())?;
    Ok(ExitCode::SUCCESS)
}
