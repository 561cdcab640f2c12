//! The resistors a bias design may move, named as in the chain file: a stage's own
//! `r_collector`, `r_emitter`, `r_emitter_bypassed` (a JFET's `r_drain`, `r_source`,
//! `r_source_bypassed`), or one of another stage (`second.r_collector`). Reading and
//! setting them on a [`Chain`] in place.

use crate::chain::Chain;
use crate::stages::StageKind;
use crate::units::Kind;
use std::fmt;

/// A resistor field of a stage, by its chain-file key.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Field {
    RTop,
    RBottom,
    RCollector,
    REmitter,
    REmitterBypassed,
    /// Collector-to-base feedback: a collector-feedback stage's bias knob.
    RFeedback,
    RDrain,
    /// A self-biased common-source stage's bias knob (V_GS = −I_D·R_S).
    RSource,
    RSourceBypassed,
}

impl Field {
    pub const ALL: [Field; 9] = [
        Field::RTop,
        Field::RBottom,
        Field::RCollector,
        Field::REmitter,
        Field::REmitterBypassed,
        Field::RFeedback,
        Field::RDrain,
        Field::RSource,
        Field::RSourceBypassed,
    ];

    /// The chain-file key.
    pub fn key(self) -> &'static str {
        match self {
            Field::RTop => "r_top",
            Field::RBottom => "r_bottom",
            Field::RCollector => "r_collector",
            Field::REmitter => "r_emitter",
            Field::REmitterBypassed => "r_emitter_bypassed",
            Field::RFeedback => "r_feedback",
            Field::RDrain => "r_drain",
            Field::RSource => "r_source",
            Field::RSourceBypassed => "r_source_bypassed",
        }
    }

    pub fn from_key(key: &str) -> Option<Field> {
        Field::ALL.into_iter().find(|f| f.key() == key)
    }

    /// A source resistor: the bias knob of a self-biased common-source stage.
    pub fn is_source(self) -> bool {
        matches!(self, Field::RSource | Field::RSourceBypassed)
    }
}

/// One resistor of one stage.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub struct Knob {
    pub stage: usize,
    pub field: Field,
}

/// Why a resistor cannot be used as a knob.
#[derive(Debug, Clone, PartialEq, thiserror::Error)]
pub enum KnobError {
    #[error("--also \"{text}\": found no stage \"{id}\"; expected one of {known}")]
    UnknownStage {
        text: String,
        id: String,
        known: String,
    },
    #[error("--also \"{text}\": found \"{key}\"; expected a resistor key of stage \"{stage}\" ({type_name}): {expected}")]
    UnknownField {
        text: String,
        key: String,
        stage: String,
        type_name: &'static str,
        expected: String,
    },
    #[error("--also \"{text}\": stage \"{stage}\" has no {key} in the file; expected a resistor that is there (add it to the chain file first)")]
    Absent {
        text: String,
        stage: String,
        key: &'static str,
    },
    #[error("--also \"{text}\": the bias resistor of stage \"{stage}\" (its divider, r_feedback or r_source) is always designed; expected another resistor")]
    OwnDivider { text: String, stage: String },
    #[error("--also \"{text}\": found it twice; expected each resistor once")]
    Repeated { text: String },
}

/// The resistor that sets a stage's base bias, which the designer always moves:
/// `r_feedback` for a collector-feedback stage, else the divider's `r_top`, or
/// `r_bottom` when that is all there is; for a self-biased JFET stage (one gate
/// resistor, no divider) its `r_source`, or a common-source stage's
/// `r_source_bypassed` when that is all there is (docs/definitions.md "Bias"); `None`
/// without any.
pub fn bias_field(kind: &StageKind) -> Option<Field> {
    let divider = get(kind, Field::RTop).is_some() && get(kind, Field::RBottom).is_some();
    let order: &[Field] = match kind {
        StageKind::CommonSource(_) | StageKind::SourceFollower(_) if !divider => {
            &[Field::RSource, Field::RSourceBypassed]
        }
        _ => &[Field::RFeedback, Field::RTop, Field::RBottom],
    };
    order.iter().copied().find(|f| get(kind, *f).is_some())
}

/// Resistor keys a stage kind has: its resistor parts ([`StageKind::parts`]) that
/// are [`Field`]s, in the kind's order.
pub fn fields_of(kind: &StageKind) -> Vec<Field> {
    kind.parts()
        .iter()
        .filter(|(_, k)| *k == Kind::Resistance)
        .filter_map(|(name, _)| Field::from_key(name))
        .collect()
}

/// The value of `field` in `kind`; `None` when the stage kind has no such key or the
/// file leaves it out (a zero default counts as absent).
pub fn get(kind: &StageKind, field: Field) -> Option<f64> {
    kind.part_value(field.key()).filter(|r| *r > 0.0)
}

/// Set `field` of `kind` to `r` (a field [`get`] returns a value for; others are left
/// alone).
pub fn set(kind: &mut StageKind, field: Field, r: f64) {
    let written = kind.set_part(field.key(), r);
    debug_assert!(written, "{field} is not a part of this stage");
}

impl Knob {
    pub fn get(self, chain: &Chain) -> Option<f64> {
        get(&chain.stages[self.stage].kind, self.field)
    }

    pub fn set(self, chain: &mut Chain, r: f64) {
        set(&mut chain.stages[self.stage].kind, self.field, r)
    }

    /// `r_collector` for the designed stage, `second.r_collector` for another one.
    pub fn label(self, chain: &Chain, designed: usize) -> String {
        if self.stage == designed {
            self.field.key().to_string()
        } else {
            format!("{}.{}", chain.stages[self.stage].id, self.field.key())
        }
    }

    /// Parse `--also` entries: `r_collector` (the designed stage) or `id.r_collector`.
    pub fn parse_list(
        chain: &Chain,
        designed: usize,
        texts: &[String],
    ) -> Result<Vec<Knob>, KnobError> {
        let mut knobs: Vec<Knob> = Vec::with_capacity(texts.len());
        for text in texts {
            let text = text.trim();
            let (stage, key) = match text.split_once('.') {
                Some((id, key)) => {
                    let stage = chain
                        .stage_index(id)
                        .ok_or_else(|| KnobError::UnknownStage {
                            text: text.to_string(),
                            id: id.to_string(),
                            known: crate::chain::name_list(
                                chain.stages.iter().map(|s| s.id.as_str()),
                            ),
                        })?;
                    (stage, key)
                }
                None => (designed, text),
            };
            let kind = &chain.stages[stage].kind;
            let allowed = fields_of(kind);
            let field = Field::from_key(key)
                .filter(|f| allowed.contains(f))
                .ok_or_else(|| KnobError::UnknownField {
                    text: text.to_string(),
                    key: key.to_string(),
                    stage: chain.stages[stage].id.clone(),
                    type_name: kind.model().type_name(),
                    expected: allowed
                        .iter()
                        .map(|f| f.key())
                        .collect::<Vec<_>>()
                        .join(", "),
                })?;
            // The divider, r_feedback, or either source resistor of a self-biased
            // JFET (both set V_GS = −I_D·R_S together) is the bias knob itself.
            let own = bias_field(kind);
            if stage == designed
                && (matches!(field, Field::RTop | Field::RBottom)
                    || Some(field) == own
                    || (field.is_source() && own.is_some_and(Field::is_source)))
            {
                return Err(KnobError::OwnDivider {
                    text: text.to_string(),
                    stage: chain.stages[stage].id.clone(),
                });
            }
            let knob = Knob { stage, field };
            if knob.get(chain).is_none() {
                return Err(KnobError::Absent {
                    text: text.to_string(),
                    stage: chain.stages[stage].id.clone(),
                    key: field.key(),
                });
            }
            if knobs.contains(&knob) {
                return Err(KnobError::Repeated {
                    text: text.to_string(),
                });
            }
            knobs.push(knob);
        }
        Ok(knobs)
    }
}

impl fmt::Display for Field {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.key())
    }
}
