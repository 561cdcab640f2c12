//! `--vary`: the parts a search moves and the series values each may take.
//!
//! Entries, comma-separated: `all` (every resistor of every stage the search can
//! vary), `STAGE.*` (every resistor of one stage), `STAGE.PART` (one resistor or
//! capacitor by its chain-file key), each part optionally with a range
//! `STAGE.PART=LOW..HIGH`. The parts come from each kind's `PARTS` table
//! ([`crate::stages::Part`]), so a new kind is tunable without a change here.
//! Resistors take values of `--series`, capacitors of `--cap-series`; without a range
//! a part stays within a decade of its value as written (docs/definitions.md "Tune").

use crate::chain::{name_list, Chain};
use crate::eseries::{self, Series};
use crate::limits;
use crate::text::{lookalike, quote, quote_value};
use crate::units::{parse_value, Kind};

/// How far a part may move without a range: this factor either way of its value as
/// written (our choice: a decade, the span a designer would look at by hand).
pub const DEFAULT_SPAN: f64 = 10.0;

/// One part the search moves.
#[derive(Debug, Clone, PartialEq)]
pub struct Variable {
    pub stage: usize,
    /// Index into the stage kind's `PARTS` table ([`crate::stages::StageKind::part_mut`]).
    pub part: usize,
    /// The chain-file key.
    pub name: &'static str,
    pub kind: Kind,
    /// The value as written.
    pub present: f64,
    /// The series values it may take, ascending, each as a chain file holds it.
    pub values: Vec<f64>,
}

impl Variable {
    /// `stage.part` as a person writes it.
    pub fn label(&self, chain: &Chain) -> String {
        format!("{}.{}", chain.stages[self.stage].id, self.name)
    }
}

/// A stage the search leaves alone, and why.
#[derive(Debug, Clone, PartialEq)]
pub struct Skipped {
    pub stage: String,
    pub reason: String,
}

/// What `--vary` selects.
#[derive(Debug, Clone, PartialEq)]
pub struct Selection {
    pub variables: Vec<Variable>,
    /// Stages named (or covered by `all`) that are not varied.
    pub skipped: Vec<Skipped>,
}

/// The two series: resistors' and capacitors'.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SeriesChoice {
    pub resistors: Series,
    pub capacitors: Series,
}

impl SeriesChoice {
    fn of(&self, kind: Kind) -> Series {
        if kind == Kind::Capacitance {
            self.capacitors
        } else {
            self.resistors
        }
    }
}

fn error(entry: &str, found: impl std::fmt::Display, expected: impl std::fmt::Display) -> String {
    format!(
        "--vary {}: found {found}, expected {expected}",
        quote_value(entry)
    )
}

/// The values a chain file holds for the series values between `lo` and `hi`.
fn series_values(series: Series, kind: Kind, lo: f64, hi: f64) -> Vec<f64> {
    let mut v: Vec<f64> = eseries::between(series, lo, hi)
        .into_iter()
        .map(|x| crate::bias::code::as_written_kind(x, kind))
        .collect();
    v.dedup();
    v
}

/// Why stage `i` cannot be varied at all (the stages `bias` refuses), if so.
fn refusal(chain: &Chain, i: usize) -> Option<String> {
    crate::bias::design::refusal(chain, i)
        .map(|r| format!("not varied (bias refuses it too): it {r}"))
}

/// Parse the `--vary` entries for `chain`.
pub fn parse(chain: &Chain, entries: &[String], series: SeriesChoice) -> Result<Selection, String> {
    let mut variables: Vec<Variable> = Vec::new();
    let mut skipped: Vec<Skipped> = Vec::new();
    let ids = || name_list(chain.stages.iter().map(|s| s.id.as_str()));
    let skip = |skipped: &mut Vec<Skipped>, i: usize, reason: String| {
        if !skipped.iter().any(|s| s.stage == chain.stages[i].id) {
            skipped.push(Skipped {
                stage: chain.stages[i].id.clone(),
                reason,
            });
        }
    };
    if entries.is_empty() {
        return Err("--vary: found nothing, expected the parts to vary, e.g. --vary all or --vary input.r_top,input.r_bottom".into());
    }
    for entry in entries {
        let entry = entry.trim();
        // (stage, key or "*", range)
        let targets: Vec<(usize, &str, Option<&str>)> = if entry == "all" {
            (0..chain.stages.len()).map(|i| (i, "*", None)).collect()
        } else {
            let (head, range) = match entry.split_once('=') {
                Some((h, r)) => (h.trim(), Some(r.trim())),
                None => (entry, None),
            };
            let (id, key) = head.split_once('.').ok_or_else(|| {
                error(
                    entry,
                    "no stage",
                    "all, STAGE.*, STAGE.PART or STAGE.PART=LOW..HIGH (e.g. input.r_top)",
                )
            })?;
            let i = chain.stage_index(id).ok_or_else(|| {
                error(
                    entry,
                    format!("stage {}", quote(id)),
                    format!(
                        "one of {}{}",
                        ids(),
                        lookalike(id, chain.stages.iter().map(|s| s.id.as_str()))
                    ),
                )
            })?;
            if key == "*" && range.is_some() {
                return Err(error(
                    entry,
                    "a range for every part",
                    "a range on one part (STAGE.PART=LOW..HIGH)",
                ));
            }
            vec![(i, key, range)]
        };
        for (i, key, range) in targets {
            let kind = &chain.stages[i].kind;
            let parts = kind.parts();
            let chosen: Vec<usize> = if key == "*" {
                (0..parts.len())
                    .filter(|p| parts[*p].1 == Kind::Resistance)
                    .collect()
            } else {
                let p = parts.iter().position(|(n, _)| *n == key).ok_or_else(|| {
                    let known: Vec<&str> = parts.iter().map(|(n, _)| *n).collect();
                    error(
                        entry,
                        format!(
                            "{} in stage {} ({})",
                            quote(key),
                            quote(&chain.stages[i].id),
                            kind.model().type_name()
                        ),
                        format!(
                            "one of its parts: {}{}",
                            known.join(", "),
                            lookalike(key, known.iter().copied())
                        ),
                    )
                })?;
                vec![p]
            };
            if let Some(reason) = refusal(chain, i) {
                skip(&mut skipped, i, reason);
                continue;
            }
            let mut stage_kind = kind.clone();
            let mut found_any = false;
            for p in chosen {
                let (name, part_kind) = parts[p];
                let Some(present) = stage_kind.part_mut(p).map(|x| *x).filter(|x| *x > 0.0) else {
                    if key != "*" {
                        return Err(error(
                            entry,
                            format!(
                                "no {name} in stage {} in the file",
                                quote(&chain.stages[i].id)
                            ),
                            "a part the stage has (add it to the chain file first)",
                        ));
                    }
                    continue;
                };
                let s = series.of(part_kind);
                let allowed = if part_kind == Kind::Capacitance {
                    limits::CAPACITANCE
                } else {
                    limits::RESISTANCE
                };
                let (lo, hi) = match range {
                    None => (
                        (present / DEFAULT_SPAN).max(allowed.min),
                        (present * DEFAULT_SPAN).min(allowed.max),
                    ),
                    Some(r) => {
                        let (a, b) = r.split_once("..").ok_or_else(|| {
                            error(
                                entry,
                                format!("the range {}", quote(r)),
                                "LOW..HIGH, e.g. 2k..22k",
                            )
                        })?;
                        let read = |t: &str| {
                            parse_value(t.trim(), part_kind)
                                .map_err(|e| error(entry, e.found, e.expected))
                        };
                        let (a, b) = (read(a)?, read(b)?);
                        if !(allowed.contains(a) && allowed.contains(b)) {
                            return Err(error(
                                entry,
                                format!("the range {}", quote(r)),
                                format!("both ends {}", allowed.describe()),
                            ));
                        }
                        if a > b {
                            return Err(error(entry, "LOW above HIGH", "LOW ≤ HIGH"));
                        }
                        (a, b)
                    }
                };
                let values = series_values(s, part_kind, lo, hi);
                if values.is_empty() {
                    return Err(error(
                        entry,
                        format!(
                            "no {s} value between {} and {}",
                            crate::units::format_si(lo, part_kind.symbol()),
                            crate::units::format_si(hi, part_kind.symbol())
                        ),
                        format!("a range holding at least one {s} value"),
                    ));
                }
                if variables.iter().any(|v| v.stage == i && v.part == p) {
                    return Err(error(
                        entry,
                        format!("{}.{name} twice", chain.stages[i].id),
                        "each part once",
                    ));
                }
                found_any = true;
                variables.push(Variable {
                    stage: i,
                    part: p,
                    name,
                    kind: part_kind,
                    present,
                    values,
                });
            }
            if !found_any && key == "*" {
                skip(
                    &mut skipped,
                    i,
                    "not varied: it has no resistor in the file".into(),
                );
            }
        }
    }
    if variables.is_empty() {
        return Err(format!(
            "--vary: found no part the search can move ({}); expected at least one resistor or capacitor of a stage with a transistor",
            skipped
                .iter()
                .map(|s| format!("\"{}\" {}", s.stage, s.reason))
                .collect::<Vec<_>>()
                .join("; ")
        ));
    }
    Ok(Selection { variables, skipped })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn chain() -> Chain {
        Chain::from_json_str(include_str!("../../chains/boost-pedal.json")).unwrap()
    }

    const E24: SeriesChoice = SeriesChoice {
        resistors: Series::E24,
        capacitors: Series::E12,
    };

    #[test]
    fn all_takes_every_resistor_written() {
        let sel = parse(&chain(), &["all".into()], E24).unwrap();
        let names: Vec<String> = sel.variables.iter().map(|v| v.label(&chain())).collect();
        assert_eq!(
            names,
            [
                "buffer.r_top",
                "buffer.r_bottom",
                "buffer.r_emitter",
                "gain1.r_top",
                "gain1.r_bottom",
                "gain1.r_collector",
                "gain1.r_emitter",
                "gain1.r_emitter_bypassed",
                "gain2.r_top",
                "gain2.r_bottom",
                "gain2.r_collector",
                "gain2.r_emitter",
                "output.r_emitter",
            ]
        );
    }

    #[test]
    fn a_range_gives_the_iec_60063_values_inside() {
        // IEC 60063 E24 from 2.0 to 2.4 (and the decade): 2k0, 2k2, 2k4.
        let sel = parse(&chain(), &["gain2.r_collector=2k..2k4".into()], E24).unwrap();
        assert_eq!(sel.variables[0].values, [2000.0, 2200.0, 2400.0]);
        let c = parse(&chain(), &["gain1.c_bypass=10u..30u".into()], E24).unwrap();
        // E12 capacitors: 10, 12, 15, 18, 22, 27 µF.
        assert_eq!(c.variables[0].values.len(), 6);
    }

    #[test]
    fn bad_entries_name_the_option() {
        let c = chain();
        for bad in [
            "nope.r_top",
            "gain1.r_nope",
            "gain1.r_top=2.05k..2.15k",
            "gain1",
        ] {
            let e = parse(&c, &[bad.into()], E24).unwrap_err();
            assert!(e.starts_with("--vary"), "{e}");
        }
    }
}
