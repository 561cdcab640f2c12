//! `plan --sweep-position`: the knob sweep for people (table) and for scripts (JSON
//! through the generic [`super::JsonExporter`], CSV).

mod csv;
mod table;
