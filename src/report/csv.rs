//! CSV of a frequency sweep for spreadsheets and scripts: one row per frequency;
//! columns `frequency_hz`, then `load_<id>_db`, `load_<id>_deg` for every load and
//! `stage_<id>_db`, `stage_<id>_deg` for every stage's own gain. Numbers in full
//! precision; corners and attribution are in the table and JSON formats.

use super::response::ResponseReport;
use super::Exporter;

pub struct CsvExporter;

/// Rows written as CSV by the `csv` crate (RFC 4180: a field with a comma, quote or
/// line break quoted, quotes doubled), every row with the header's field count.
pub struct Rows<'a> {
    writer: csv::Writer<&'a mut dyn std::io::Write>,
}

impl<'a> Rows<'a> {
    pub fn new(out: &'a mut dyn std::io::Write) -> Rows<'a> {
        Rows {
            writer: csv::WriterBuilder::new().flexible(false).from_writer(out),
        }
    }

    /// One row of fields.
    pub fn row<I, T>(&mut self, fields: I) -> std::io::Result<()>
    where
        I: IntoIterator<Item = T>,
        T: AsRef<[u8]>,
    {
        self.writer.write_record(fields).map_err(into_io)
    }

    /// Flush what is buffered.
    pub fn finish(mut self) -> std::io::Result<()> {
        self.writer.flush()
    }
}

fn into_io(e: csv::Error) -> std::io::Error {
    match e.into_kind() {
        csv::ErrorKind::Io(e) => e,
        other => std::io::Error::other(format!("{other:?}")),
    }
}

impl Exporter<ResponseReport> for CsvExporter {
    fn export(&self, r: &ResponseReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        let mut header = vec!["frequency_hz".to_string()];
        for l in &r.loads {
            header.push(format!("load_{}_db", l.id));
            header.push(format!("load_{}_deg", l.id));
        }
        for s in &r.stages {
            header.push(format!("stage_{}_db", s.id));
            header.push(format!("stage_{}_deg", s.id));
        }
        rows.row(&header)?;
        for (j, f) in r.frequencies.iter().enumerate() {
            let mut cells = vec![number(*f)];
            for l in &r.loads {
                cells.push(number(l.magnitude_db[j]));
                cells.push(number(l.phase_deg[j]));
            }
            for s in &r.stages {
                cells.push(number(s.magnitude_db[j]));
                cells.push(number(s.phase_deg[j]));
            }
            rows.row(&cells)?;
        }
        rows.finish()
    }
}

/// A number written by `write`, or an empty field where there is none: an infinite
/// value (an open port, a passive stage's limits and clip level) or not a number,
/// which the JSON writes as null (README "What `plan` prints"). Every CSV exporter
/// writes its numbers through this.
pub fn field(x: f64, write: impl FnOnce(f64) -> String) -> String {
    if x.is_finite() {
        write(x)
    } else {
        String::new()
    }
}

/// A number in full precision (zero unsigned); an empty field where it is infinite.
pub fn number(x: f64) -> String {
    field(x, |x| if x == 0.0 { "0".into() } else { x.to_string() })
}

/// A number in scientific notation (`1.5e-3`); an empty field where it is infinite.
pub fn scientific(x: f64) -> String {
    field(x, |x| format!("{x:e}"))
}

/// An optional number in full precision; an empty field where it is absent or infinite.
pub fn optional(x: Option<f64>) -> String {
    x.map_or_else(String::new, number)
}

/// The operating-point columns (a bipolar device's named quantities, then a JFET's,
/// then an op-amp's); empty cells for a stage that has none of them ([`op_cells`]).
const OP_COLUMNS: [&str; 17] = [
    "i_c",
    "i_b",
    "i_e",
    "v_be",
    "v_be_junction",
    "v_ce",
    "v_b",
    "v_c",
    "v_e",
    "i_d",
    "v_gs",
    "v_ds",
    "v_g",
    "v_d",
    "v_s",
    "v_out",
    "i_out",
];

fn op_cells(op: Option<&crate::device::Quantities>) -> Vec<String> {
    OP_COLUMNS
        .iter()
        .map(|name| optional(op.and_then(|q| q.get(name))))
        .collect()
}

/// `plan` as CSV: one row per stage, then one per load (`kind` says which; a column a
/// row has no value for is empty). Names and SI units as in the JSON: for a load,
/// `gain` is v(load)/EMF and `resistance` its resistance.
impl Exporter<super::PlanReport> for CsvExporter {
    fn export(&self, r: &super::PlanReport, out: &mut dyn std::io::Write) -> std::io::Result<()> {
        const AFTER_OP: [&str; 18] = [
            "r_in",
            "r_out",
            "load",
            "resistance",
            "gain",
            "gain_db",
            "gain_phase_deg",
            "cumulative_gain",
            "input_vrms",
            "output_vrms",
            "output_dbu",
            "limit_up",
            "limit_down",
            "clip_input_vpeak",
            "clip_input_vrms",
            "clip_toward",
            "headroom_db",
            "dissipation_transistor",
        ];
        let mut rows = Rows::new(out);
        let mut header = vec!["kind", "id", "type", "device", "input_from"];
        header.extend(OP_COLUMNS);
        header.extend(AFTER_OP);
        rows.row(&header)?;
        for s in &r.stages {
            let mut cells = vec![
                "stage".to_string(),
                s.id.clone(),
                s.kind.to_string(),
                s.device.clone().unwrap_or_default(),
                s.input_from.clone(),
            ];
            cells.extend(op_cells(s.operating_point.as_ref()));
            cells.extend([
                number(s.r_in),
                number(s.r_out),
                number(s.load),
                String::new(),
                number(s.gain),
                number(s.gain_db),
                number(s.gain_phase_deg),
                number(s.cumulative_gain),
                number(s.input_vrms),
                number(s.output_vrms),
                number(s.output_dbu),
                number(s.limit_up),
                number(s.limit_down),
                number(s.clip_input_vpeak),
                number(s.clip_input_vrms),
                s.clip_toward.map_or(String::new(), |t| t.to_string()),
                number(s.headroom_db),
                optional(s.dissipation.transistor),
            ]);
            rows.row(&cells)?;
        }
        for l in &r.loads {
            let mut cells = vec![
                "load".to_string(),
                l.id.clone(),
                String::new(),
                String::new(),
                l.from.clone(),
            ];
            cells.extend(OP_COLUMNS.map(|_| String::new()));
            let mut rest: Vec<String> = AFTER_OP.map(|_| String::new()).to_vec();
            let mut put = |name: &str, value: f64| {
                let k = AFTER_OP.iter().position(|c| *c == name).unwrap_or(0);
                rest[k] = number(value);
            };
            put("resistance", l.resistance);
            put("gain", l.gain);
            put("gain_db", l.gain_db);
            put("gain_phase_deg", l.gain_phase_deg);
            put("output_vrms", l.output_vrms);
            put("output_dbu", l.output_dbu);
            cells.extend(rest);
            rows.row(&cells)?;
        }
        rows.finish()
    }
}

/// `check` as CSV: one row per stage with its operating point and its warnings
/// (joined by "; "), then, when there are any, one row of the chain's own warnings.
impl Exporter<super::check::CheckReport> for CsvExporter {
    fn export(
        &self,
        r: &super::check::CheckReport,
        out: &mut dyn std::io::Write,
    ) -> std::io::Result<()> {
        let mut rows = Rows::new(out);
        let mut header = vec!["kind", "id", "type"];
        header.extend(OP_COLUMNS);
        header.push("warnings");
        rows.row(&header)?;
        let warnings_of = |stage: Option<&str>| {
            r.warnings
                .iter()
                .filter(|w| w.stage.as_deref() == stage)
                .map(|w| w.message.as_str())
                .collect::<Vec<_>>()
                .join("; ")
        };
        for s in &r.stages {
            let mut cells = vec!["stage".to_string(), s.id.clone(), s.kind.to_string()];
            cells.extend(op_cells(s.operating_point.as_ref()));
            cells.push(warnings_of(Some(&s.id)));
            rows.row(&cells)?;
        }
        let chain_wide = warnings_of(None);
        if !chain_wide.is_empty() {
            let mut cells = vec!["chain".to_string(), String::new(), String::new()];
            cells.extend(OP_COLUMNS.map(|_| String::new()));
            cells.push(chain_wide);
            rows.row(&cells)?;
        }
        rows.finish()
    }
}

/// `bias` as CSV: one row for the present values (`now`, when they have an operating
/// point), the ideal values, then each proposal by rank; one column per resistor the
/// design moves (ohms), then the operating point and what it gives, SI units and the
/// JSON's names.
impl Exporter<crate::bias::report::BiasReport> for CsvExporter {
    fn export(
        &self,
        r: &crate::bias::report::BiasReport,
        out: &mut dyn std::io::Write,
    ) -> std::io::Result<()> {
        use crate::bias::report::PointReport;
        let resistors: Vec<&str> = r.ideal.values.iter().map(|v| v.resistor.as_str()).collect();
        let mut rows = Rows::new(out);
        let mut header = vec!["row".to_string()];
        header.extend(resistors.iter().map(|n| n.to_string()));
        // The Q point by the device's own JSON names (i_d and v_ds for a JFET).
        header.push(r.names.current.to_ascii_lowercase());
        header.push(r.names.voltage.to_ascii_lowercase());
        header.extend(
            [
                "limit_up",
                "limit_down",
                "gain",
                "gain_db",
                "r_in",
                "divider_ratio",
                "stage_clip_dbu",
                "chain_clip_dbu",
                "chain_clip_stage",
            ]
            .map(String::from),
        );
        rows.row(&header)?;
        let point = |p: &PointReport| {
            vec![
                number(p.op.i_c),
                number(p.op.v_ce),
                number(p.limit_up),
                number(p.limit_down),
                number(p.gain),
                number(p.gain_db),
                number(p.r_in),
                optional(p.divider_ratio),
                number(p.stage_clip.input_dbu),
                number(p.chain_clip.input_dbu),
                p.chain_clip.stage.clone(),
            ]
        };
        if let Some(p) = &r.present {
            let mut cells = vec!["now".to_string()];
            cells.extend(resistors.iter().map(|n| {
                r.present_values
                    .iter()
                    .find(|v| v.resistor == *n)
                    .map_or(String::new(), |v| number(v.value))
            }));
            cells.extend(point(p));
            rows.row(&cells)?;
        }
        let mut cells = vec!["ideal".to_string()];
        cells.extend(r.ideal.values.iter().map(|v| number(v.value)));
        cells.extend(point(&r.ideal.point));
        rows.row(&cells)?;
        for q in &r.proposals {
            let mut cells = vec![q.rank.to_string()];
            cells.extend(resistors.iter().map(|n| {
                q.values
                    .iter()
                    .find(|v| v.resistor == *n)
                    .map_or(String::new(), |v| number(v.to))
            }));
            cells.extend(point(&q.point));
            rows.row(&cells)?;
        }
        rows.finish()
    }
}

#[cfg(test)]
mod tests {
    use super::Rows;

    #[test]
    fn fields_are_quoted_per_rfc_4180() {
        // RFC 4180 §2: fields with commas, quotes or line breaks are enclosed in quotes,
        // quotes doubled.
        let mut out = Vec::new();
        let mut rows = Rows::new(&mut out);
        rows.row(["load_out_db", "load_a,b_db", "say \"hi\"", "two\nlines"])
            .unwrap();
        rows.finish().unwrap();
        assert_eq!(
            String::from_utf8(out).unwrap(),
            "load_out_db,\"load_a,b_db\",\"say \"\"hi\"\"\",\"two\nlines\"\n"
        );
    }
}
