//! Noise by an independent route: every source injected on its own into the flat
//! reference network (a 1 A test current between its two terminals, the source EMF
//! dead), the output voltage read, and the powers added. Nothing here uses the
//! planner's noise code; the sources follow docs/definitions.md "Noise" (4kT/R across
//! every resistor, 2q·I_B between the device's own base and its emitter, 2q·I_C
//! between its own collector and its emitter), read from this module's own DC solution.

use super::*;

/// One noise current source of the reference network (white; flicker is not modelled
/// here).
#[derive(Debug, Clone)]
pub struct RefSource {
    pub stage: Option<usize>,
    /// The element's name in reports (docs/definitions.md "Noise").
    pub element: String,
    pub a: Term,
    pub b: Term,
    /// A²/Hz (V²/Hz for an op-amp's `voltage_noise`).
    pub density: f64,
    /// `Some(i)`: not a current between `a` and `b` but a voltage in series with the +
    /// input of stage i's op-amp.
    pub series: Option<usize>,
}

/// The chain-file name of stage `i`'s resistor `name`: a JFET stage, wired as the
/// bipolar stage of the same shape, names its drain and source resistors itself.
pub fn file_name(chain: &Chain, i: usize, name: &'static str) -> &'static str {
    match (chain.stages[i].device.jfet.is_some(), name) {
        (true, "r_collector") => "r_drain",
        (true, "r_emitter") => "r_source",
        (true, "r_emitter_bypassed") => "r_source_bypassed",
        _ => name,
    }
}

/// Every white noise source of `chain` at the DC solution `dc`.
pub fn sources(chain: &Chain, dc: &DcSolution) -> Vec<RefSource> {
    let kt4 = 4.0 * BOLTZMANN * chain.temperature;
    let mut out = Vec::new();
    for r in chain.resistors() {
        if r.r == 0.0 || !r.r.is_finite() {
            continue;
        }
        let (stage, element) = match (r.owner, r.a) {
            (Some((i, name)), _) => (Some(i), file_name(chain, i, name).to_string()),
            // docs/definitions.md names a feedback link's resistor `feedback:<from>-><to>`.
            (None, _) if matches!(r.b, Term::Feedback(_)) => {
                let Term::Feedback(k) = r.b else {
                    unreachable!()
                };
                let l = &chain.feedback[k];
                let id = |i: usize| chain.stages[i].id.clone();
                (None, format!("feedback:{}->{}", id(l.from), id(l.to)))
            }
            (None, Term::Emf) => (None, "source_resistance".to_string()),
            (None, Term::Load(j)) => (None, format!("load:{}", chain.loads[j].id)),
            // An op-amp's own r_in and r_out have no noise (docs/definitions.md "Op-amp").
            (None, Term::Base(i) | Term::EmitterMid(i) | Term::IntCollector(i))
                if chain.stages[i].opamp().is_some() =>
            {
                continue
            }
            (None, t) => panic!("a resistor without an owner at {t:?}"),
        };
        out.push(RefSource {
            stage,
            element,
            a: r.a,
            b: r.b,
            density: kt4 / r.r,
            series: None,
        });
    }
    for (i, op) in dc.op.iter().enumerate() {
        if let Some(o) = chain.stages[i].opamp() {
            // e_n² in series with +, i_n² from each input pin to ground.
            if o.e_n > 0.0 {
                out.push(RefSource {
                    stage: Some(i),
                    element: "voltage_noise".into(),
                    a: o.plus(i),
                    b: o.plus(i),
                    density: o.e_n * o.e_n,
                    series: Some(i),
                });
            }
            if o.i_n > 0.0 {
                for (element, pin) in [
                    ("current_noise_plus", o.plus(i)),
                    ("current_noise_minus", Term::Emitter(i)),
                ] {
                    out.push(RefSource {
                        stage: Some(i),
                        element: element.into(),
                        a: pin,
                        b: Term::Ground,
                        density: o.i_n * o.i_n,
                        series: None,
                    });
                }
            }
            continue;
        }
        if !chain.stages[i].is_transistor() {
            continue;
        }
        if chain.stages[i].device.jfet.is_some() {
            // Channel thermal noise 4kT·(2/3)·g_m between drain and source.
            out.push(RefSource {
                stage: Some(i),
                element: "channel_thermal".into(),
                a: Term::IntCollector(i),
                b: Term::Emitter(i),
                density: kt4 * (2.0 / 3.0) * dc.junctions[i].g_m,
                series: None,
            });
            continue;
        }
        let two_q = 2.0 * ELEMENTARY_CHARGE;
        out.push(RefSource {
            stage: Some(i),
            element: "base_shot".into(),
            a: Term::IntBase(i),
            b: Term::Emitter(i),
            density: two_q * op.i_b.abs(),
            series: None,
        });
        out.push(RefSource {
            stage: Some(i),
            element: "collector_shot".into(),
            a: Term::IntCollector(i),
            b: Term::Emitter(i),
            density: two_q * op.i_c.abs(),
            series: None,
        });
    }
    out
}

/// The output noise density (V²/Hz) that source `s` gives at terminal `out` at `f` Hz:
/// |v_out per ampere|²·S. Zero when both ends sit on fixed nodes (AC ground).
pub fn output_density(
    chain: &Chain,
    dc: &DcSolution,
    s: &RefSource,
    f: f64,
    out: Term,
) -> Result<f64, String> {
    if let Some(i) = s.series {
        let v = solve_ac(
            chain,
            dc,
            &Setup {
                emf: 0.0,
                freq: Some(f),
                opamp_emf: Some(i),
                ..Setup::default()
            },
        )?;
        return Ok(v[chain.term_index(out)].norm_sqr() * s.density);
    }
    let try_inject = |a: Term, b: Term| {
        solve_ac(
            chain,
            dc,
            &Setup {
                emf: 0.0,
                freq: Some(f),
                inject: Some(a),
                inject_return: Some(b),
                ..Setup::default()
            },
        )
    };
    // The test current must enter at a node that is not fixed; the power does not
    // depend on its direction.
    let volts = match try_inject(s.a, s.b) {
        Ok(v) => v,
        Err(_) => match try_inject(s.b, s.a) {
            Ok(v) => v,
            Err(e) if e.contains("fixed node") => return Ok(0.0),
            Err(e) => return Err(e),
        },
    };
    let v_out = volts[chain.term_index(out)];
    Ok(v_out.norm_sqr() * s.density)
}

/// ∫ S(f) df over `f_lo` … `f_hi` by composite Simpson in u = ln f on `n` (even)
/// intervals: ∫ S(e^u)·e^u du (textbook quadrature; error about h⁴ for smooth S).
pub fn simpson_log(f_lo: f64, f_hi: f64, n: usize, mut density: impl FnMut(f64) -> f64) -> f64 {
    let (lo, hi) = (f_lo.ln(), f_hi.ln());
    let h = (hi - lo) / n as f64;
    let mut sum = 0.0;
    for j in 0..=n {
        let f = (lo + h * j as f64).exp();
        let w = if j == 0 || j == n {
            1.0
        } else if j % 2 == 1 {
            4.0
        } else {
            2.0
        };
        sum += w * density(f) * f;
    }
    sum * h / 3.0
}
