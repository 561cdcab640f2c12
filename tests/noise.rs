//! Noise (`src/noise/`): sources, transfers and band integration against outside
//! references, each named beside its check.

mod common;
mod reference;

use ampchain::noise::integrate::integrate_band;
use ampchain::noise::sources::{shot_density, thermal_current_density};
use ampchain::noise::weighting::a_weighting_db;
use ampchain::noise::{self, NoiseBand, NoiseModel, Weighting};
use ampchain::response::AtFrequency;
use ampchain::Chain;
use rand::{Rng, SeedableRng};
use std::collections::BTreeMap;
use std::path::Path;

fn chain_at(path: &Path) -> Chain {
    Chain::from_json_str(&std::fs::read_to_string(path).unwrap()).unwrap()
}

fn fixture(name: &str) -> std::path::PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/fixtures")
        .join(name)
}

/// 0 dBu = √0.6 V rms.
fn dbu(vrms: f64) -> f64 {
    20.0 * (vrms / 0.6f64.sqrt()).log10()
}

/// The chain's noise over 20 Hz … 20 kHz, unweighted, and the source resistance's index.
fn audio_band(chain: &Chain) -> (NoiseModel, noise::BandNoise, usize) {
    let mut model = NoiseModel::new(chain).unwrap();
    let band = noise::band_noise(&mut model, noise::DEFAULT_BAND, Weighting::None).unwrap();
    let s = model.source_resistance().unwrap();
    (model, band, s)
}

#[test]
fn thermal_and_shot_densities_from_the_si_constants() {
    // 4kTR of 1 kΩ at 300 K = 4.07 nV/√Hz; 2qI of 1 mA = 17.9 pA/√Hz (SI Brochure, 9th
    // edition: k = 1.380649e-23 J/K, q = 1.602176634e-19 C, exact; rounded as printed).
    let e_n = (thermal_current_density(1e3, 300.0) * 1e3 * 1e3).sqrt();
    assert!((e_n * 1e9 - 4.07).abs() < 0.005, "{e_n}");
    let i_n = shot_density(1e-3).sqrt();
    assert!((i_n * 1e12 - 17.9).abs() < 0.05, "{i_n}");
}

#[test]
fn a_weighting_against_the_iec_61672_table() {
    // IEC 61672-1, table of A-weightings (nominal frequencies, 0.1 dB), from memory:
    // 10 Hz −70.4, 31.5 Hz −39.4, 100 Hz −19.1, 1 kHz 0.0, 10 kHz −2.5, 20 kHz −9.3.
    // The table's exact frequencies are base-ten values near the nominal ones
    // (31.62 Hz for 31.5), so those are used: 10^(n/10).
    for (f, want) in [
        (10.0, -70.4),
        (10f64.powf(1.5), -39.4),
        (100.0, -19.1),
        (1000.0, 0.0),
        (10_000.0, -2.5),
        (10f64.powf(4.3), -9.3),
    ] {
        let got = a_weighting_db(f);
        assert!(
            (got - want).abs() <= 0.05,
            "A({f} Hz) = {got} dB, table {want}"
        );
    }
}

#[test]
fn flat_network_transfer_equals_the_response_gain() {
    // The adjoint network's EMF → load transfer against `response`'s two-port cascade
    // at several frequencies: two independent routes through the same small-signal
    // model (one flat nodal network vs cascaded two-ports), to 1e-9.
    let mut worst: f64 = 0.0;
    for path in common::demo_chains() {
        let chain = chain_at(&path);
        let mut model = NoiseModel::new(&chain).unwrap();
        let mid = chain.evaluate().unwrap();
        let mut at = AtFrequency::new(&chain, &mid);
        for f in [1.0, 20.0, 1e3, 20e3, 1e6] {
            at.run(f);
            for (k, node) in model.netlist.loads.clone().into_iter().enumerate() {
                let h = model.emf_transfer(f, node).unwrap();
                let g = at.load_gain[k];
                let rel = (h - g).norm() / g.norm();
                worst = worst.max(rel);
                assert!(
                    rel < 1e-9,
                    "{}: load {k} at {f} Hz: {h} vs {g}",
                    path.display()
                );
            }
        }
    }
    println!("EMF → load, flat network vs response: worst relative difference {worst:e}");
}

#[test]
fn source_resistance_of_150_ohm_over_the_audio_band() {
    // A 150 Ω source alone over 20 Hz–20 kHz at 25 °C: −130.9 dBu (common practice, no
    // source: "−131 dBu" for a 150 Ω microphone; the closed form gives −130.85). Read
    // as the source resistance's share of the EIN of a chain flat over the band
    // (coupling 10 F, no device capacitances): its noise reaches the load exactly as
    // the EMF does.
    let text = std::fs::read_to_string(fixture("noise_ce_nf.json"))
        .unwrap()
        .replace("\"1k\", \"level\"", "\"150\", \"level\"")
        .replace("\"300 K\"", "\"25 C\"");
    let chain = Chain::from_json_str(&text).unwrap();
    assert_eq!(chain.source.r_s, 150.0);
    let (model, band, s) = audio_band(&chain);
    let gain = model.midband.load_gain[0].norm();
    let ein = band.power[0][s].sqrt() / gain;
    assert!((dbu(ein) - (-130.9)).abs() < 0.1, "{} dBu", dbu(ein));
    // And to the integration tolerance against the closed form √(4kTR·(f_hi − f_lo)).
    let exact = (thermal_current_density(150.0, 298.15) * 150.0 * 150.0 * 19_980.0).sqrt();
    assert!((ein - exact).abs() < 1e-6 * exact, "{ein} vs {exact}");
}

#[test]
fn resistor_through_rc_low_pass_integrates_to_kt_over_c() {
    // kT/C noise (textbook, from memory): a resistor's thermal noise across a capacitor C
    // totals √(kT/C) whatever the resistance. Fixture: the 100 Ω source resistance
    // directly on a load of 100 GΩ ∥ 1 µF (corner 1.59 kHz), integrated over the widest
    // band the program allows (1 mHz … 100 GHz), which leaves out about
    // 2/π·(f_lo/f_c + f_c/f_hi) = 4e-7 of the power. (A follower hangs on the source
    // node through 1 fF, since every chain needs a stage; its base shot noise reaches
    // the node only at GHz, about 4e-9 of the power.)
    let chain = chain_at(&fixture("noise_ktc.json"));
    let mut model = NoiseModel::new(&chain).unwrap();
    let band = NoiseBand {
        from: 1e-3,
        to: 1e11,
    };
    let result = noise::band_noise(&mut model, band, Weighting::None).unwrap();
    let k = chain.loads.iter().position(|l| l.id == "cap").unwrap();
    let kt_c = 1.380649e-23 * 300.0 / 1e-6;
    let total = result.total(k);
    assert!((total - kt_c).abs() < 1e-6 * kt_c, "{total} vs {kt_c}");
    assert!(result.relative_error <= noise::TOLERANCE);
}

#[test]
fn load_totals_alone_integrate_to_kt_over_c_and_to_the_split_totals() {
    // The totals-only integration `spread` and `tune` use: kT/C on the fixture above
    // (textbook, from memory; same band and allowance), and on every demo chain the
    // sum of the per-source integrals of `band_noise` (each to 1e-7, so within 1e-6).
    let chain = chain_at(&fixture("noise_ktc.json"));
    let mut model = NoiseModel::new(&chain).unwrap();
    let band = NoiseBand {
        from: 1e-3,
        to: 1e11,
    };
    let totals = noise::band_load_totals(&mut model, band, Weighting::None).unwrap();
    let k = chain.loads.iter().position(|l| l.id == "cap").unwrap();
    let kt_c = 1.380649e-23 * 300.0 / 1e-6;
    assert!(
        (totals[k] - kt_c).abs() < 1e-6 * kt_c,
        "{} vs {kt_c}",
        totals[k]
    );
    for path in common::demo_chains() {
        let chain = chain_at(&path);
        let Ok(mut model) = NoiseModel::new(&chain) else {
            continue;
        };
        for weighting in [Weighting::None, Weighting::A] {
            let split = noise::band_noise(&mut model, noise::DEFAULT_BAND, weighting).unwrap();
            let totals =
                noise::band_load_totals(&mut model, noise::DEFAULT_BAND, weighting).unwrap();
            for (k, t) in totals.iter().enumerate() {
                let whole = split.total(k);
                assert!(
                    (t - whole).abs() <= 1e-6 * whole,
                    "{}: load {k}: {t} vs {whole}",
                    path.display()
                );
            }
        }
    }
}

#[test]
fn integrator_on_the_analytic_rc_response() {
    // The band integrator on |H|² = 1/(1 + (f/f_c)²) times 4kTR, against the closed form
    // 4kTR·f_c·(atan(f_hi/f_c) − atan(f_lo/f_c)) (calculus), to 1e-7 relative.
    let (r, c, t) = (10e3, 10e-9, 300.0);
    let f_c = 1.0 / (2.0 * std::f64::consts::PI * r * c);
    let s_v = thermal_current_density(r, t) * r * r;
    let i = integrate_band(20.0, 20e3, &[0], noise::TOLERANCE, |f, out| {
        out[0] = s_v / (1.0 + (f / f_c).powi(2))
    });
    let exact = s_v * f_c * ((20e3 / f_c).atan() - (20.0 / f_c).atan());
    assert!((i.values[0] - exact).abs() < 1e-7 * exact);
}

#[test]
fn common_emitter_noise_figure_against_the_textbook_formula() {
    // F = 1 + (r_bb' + 1/(2g_m))/R_S + g_m·R_S/(2β) (textbook, from memory), where its
    // assumptions hold: no bias resistors (the base is fed straight from the source on
    // split rails), R_E bypassed by 10 F, r_π = 129 kΩ ≫ R_S + r_bb' = 1.1 kΩ, and the
    // collector side small (4kT/R_C and the load over g_m² against 4kTR_S: 0.15 %).
    // The neglected terms (r_π loading, base shot noise through r_bb', R_C) amount to
    // under 0.5 % of F.
    let chain = chain_at(&fixture("noise_ce_nf.json"));
    let (model, band, s) = audio_band(&chain);
    let f_model = band.total(0) / band.power[0][s];
    let op = model.midband.dc[0].op;
    let v_t = model.midband.v_t;
    let g_m = op.i_c / v_t;
    let beta = op.i_c / op.i_b;
    let (r_s, r_bb) = (1e3, 100.0);
    let f_book = 1.0 + (r_bb + 1.0 / (2.0 * g_m)) / r_s + g_m * r_s / (2.0 * beta);
    println!("F: model {f_model}, textbook {f_book}");
    assert!(
        (f_model - f_book).abs() < 5e-3 * f_book,
        "{f_model} vs {f_book}"
    );
}

#[test]
fn flicker_density_follows_one_plus_corner_over_f() {
    // Base-current noise 2qI_B·(1 + f_c/f) (the 1/f law with corner f_c,
    // docs/definitions.md): the base shot and flicker contributions at any output
    // stand in the ratio f_c/f, so the base-current density at f_c/10 and 10·f_c is
    // 11 and 1.1 times the shot density.
    let text = std::fs::read_to_string(fixture("noise_ce_nf.json"))
        .unwrap()
        .replace(
            "\"base_resistance\": \"100\"",
            "\"base_resistance\": \"100\", \"flicker_corner\": \"2k\"",
        );
    let chain = Chain::from_json_str(&text).unwrap();
    assert_eq!(chain.devices[0].flicker_corner, 2e3);
    let mut model = NoiseModel::new(&chain).unwrap();
    let at = |name: &str| {
        model
            .sources
            .iter()
            .position(|s| s.element == name)
            .unwrap()
    };
    let (shot, flicker) = (at("base_shot"), at("base_flicker"));
    let mut d = vec![0.0; model.density_len()];
    for (f, ratio) in [(200.0, 11.0), (20e3, 1.1)] {
        model.densities(f, 1.0, &mut d).unwrap();
        let got = (d[shot] + d[flicker]) / d[shot];
        assert!((got - ratio).abs() < 1e-12 * ratio, "{f} Hz: {got}");
    }
}

/// Per element (stage, name), the output noise density at load `k` and `f`: from the
/// adjoint pass, and from the reference's separate injections.
fn both_routes(text: &str, freqs: &[f64]) -> Option<Vec<(String, f64, f64)>> {
    let chain = Chain::from_json_str(text).ok()?;
    let mut model = NoiseModel::new(&chain).ok()?;
    let rc = reference::Chain::from_text(text).ok()?;
    let dc = reference::solve_dc(&rc).ok()?;
    if !reference::out_of_active_region(&rc, &dc).is_empty() {
        return None;
    }
    let sources = reference::noise::sources(&rc, &dc);
    let n = model.sources.len();
    let mut d = vec![0.0; model.density_len()];
    let mut out = Vec::new();
    for &f in freqs {
        model.densities(f, 1.0, &mut d).unwrap();
        for (k, load) in chain.loads.iter().enumerate() {
            let mut ours: BTreeMap<(Option<usize>, String), f64> = BTreeMap::new();
            for (s, src) in model.sources.iter().enumerate() {
                if src.element != "base_flicker" {
                    *ours.entry((src.stage, src.element.clone())).or_default() += d[k * n + s];
                }
            }
            let mut theirs: BTreeMap<(Option<usize>, String), f64> = BTreeMap::new();
            for s in &sources {
                let p = reference::noise::output_density(&rc, &dc, s, f, reference::Term::Load(k))
                    .unwrap();
                *theirs.entry((s.stage, s.element.clone())).or_default() += p;
            }
            let total: f64 = theirs.values().sum();
            let keys: std::collections::BTreeSet<_> = ours.keys().chain(theirs.keys()).collect();
            for key in keys {
                let a = ours.get(key).copied().unwrap_or(0.0);
                let b = theirs.get(key).copied().unwrap_or(0.0);
                out.push((
                    format!("load {} at {f} Hz, {key:?}", load.id),
                    a / total,
                    b / total,
                ));
            }
            let ours_total: f64 = ours.values().sum();
            out.push((
                format!("load {} at {f} Hz, total", load.id),
                ours_total / total,
                1.0,
            ));
        }
    }
    Some(out)
}

fn assert_routes_agree(what: &str, rows: &[(String, f64, f64)]) -> f64 {
    let mut worst: f64 = 0.0;
    for (name, a, b) in rows {
        // Each element's density as a fraction of the reference total, to 1e-9.
        let diff = (a - b).abs();
        worst = worst.max(diff);
        assert!(
            diff < 1e-9,
            "{what}: {name}: adjoint {a:e}, reference {b:e} (of the total)"
        );
    }
    worst
}

#[test]
fn adjoint_agrees_with_separate_injections_on_every_demo() {
    // tests/reference: the whole chain as one flat network from the spec types alone,
    // each source injected on its own (nalgebra LU), powers added; against the adjoint
    // pass, every element's density to 1e-9 of the total.
    let mut worst: f64 = 0.0;
    // The demo chains (the op-amp demo among them: JFET buffer, transistor gain, op-amp
    // driver).
    for path in common::demo_chains() {
        let text = std::fs::read_to_string(&path).unwrap();
        let rows = both_routes(&text, &[20.0, 1e3, 20e3, 1e6])
            .unwrap_or_else(|| panic!("{}: both routes run", path.display()));
        worst = worst.max(assert_routes_agree(&path.display().to_string(), &rows));
    }
    println!("demo chains: worst difference {worst:e} of the total density");
}

#[test]
fn adjoint_agrees_with_separate_injections_on_generated_chains() {
    // 200 generated version-2 chains (tests/reference/generate.rs: NPN/PNP, split rails,
    // r_bb', r_c, common base, cascodes, r_feedback, supply filters), one frequency each
    // drawn from 10 Hz … 1 MHz; chains either side cannot bias are drawn again.
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(19);
    let (mut checked, mut drawn) = (0, 0);
    let mut worst: f64 = 0.0;
    while checked < 200 {
        drawn += 1;
        assert!(
            drawn < 2000,
            "too few generated chains bias: {checked} of {drawn}"
        );
        let values: Vec<f64> = (0..256).map(|_| rng.random::<f64>()).collect();
        let text = serde_json::to_string(&reference::generate::generate_chain_v2(
            &mut reference::generate::Dice { values, next: 0 },
        ))
        .unwrap();
        let f = 10f64.powf(rng.random_range(1.0..6.0));
        if let Some(rows) = both_routes(&text, &[f]) {
            worst = worst.max(assert_routes_agree(
                &format!("generated chain {drawn}"),
                &rows,
            ));
            checked += 1;
        }
    }
    println!("{checked} generated chains of {drawn}: worst difference {worst:e} of the total");
}

#[test]
fn spread_noise_follows_the_temperature_of_thermal_noise() {
    // Johnson–Nyquist: thermal noise power is proportional to T (4kTR). The load "cap"
    // of the kT/C fixture sees only the source resistance and its own (the follower's
    // shot noise reaches it through 1 fF, about 1e-9 of the power), and its gain does
    // not move with T: with only the temperature spreading (250 K … 350 K; both ends
    // are the corner pass's two builds), EIN(T) = EIN(T0)·√(T/T0) to 1e-6.
    use ampchain::spread::{self, measure::NoiseMeasure, Measure, SpreadModel};
    let text = std::fs::read_to_string(fixture("noise_ktc.json")).unwrap();
    let spec = ampchain::spec::parse_chain_text(&text).unwrap();
    let chain = Chain::from_json_str(&text).unwrap();
    let mut measure = Measure::MIDBAND;
    measure.noise = Some(NoiseMeasure {
        band: noise::DEFAULT_BAND,
        weighting: Weighting::None,
        planned_vrms: None,
    });
    let model = SpreadModel::build(&spec, &chain, Some((250.0, 350.0)), true).unwrap();
    assert_eq!(model.spreads.len(), 1, "only the temperature spreads");
    let run = spread::run(&chain, model, measure, 16, 1, &|_| {}).unwrap();
    let layout = run.trials.layout;
    let k = chain.loads.iter().position(|l| l.id == "cap").unwrap();
    let nominal = run.nominal[layout.ein(k)];
    let t0 = chain.temperature;
    let corners = run.corners.records.column(layout.ein(k)).to_vec();
    assert_eq!(corners.len(), 2);
    let mut want = [nominal * (250.0 / t0).sqrt(), nominal * (350.0 / t0).sqrt()];
    let mut got = [corners[0], corners[1]];
    want.sort_by(f64::total_cmp);
    got.sort_by(f64::total_cmp);
    for (g, w) in got.iter().zip(want) {
        assert!((g - w).abs() < 1e-6 * w, "{g} vs {w}");
    }
    // Every Monte Carlo build lies between the two ends; no SNR without a planned level.
    for t in 0..run.trials.runs {
        let row = run.trials.row(t);
        assert!(row[layout.ein(k)] >= got[0] * (1.0 - 1e-9));
        assert!(row[layout.ein(k)] <= got[1] * (1.0 + 1e-9));
        assert!(row[layout.snr(k)].is_nan());
    }
}

#[test]
fn a_weighted_rc_noise_against_simpson_on_the_closed_form() {
    // The kT/C fixture's load "cap" carries R_S = 100 Ω's noise through the low pass
    // R_S ∥ R_L, C: |v|² = 4kT·R_p/(1 + (ωR_pC)²) per hertz from both resistors
    // (Johnson–Nyquist, textbook), A-weighted in power by IEC 61672-1's analytic form
    // (this crate's a_weighting_gain, checked against the standard's table above),
    // integrated here by composite Simpson in ln f on 4000 intervals; against the
    // engine's adaptive integral, to 1e-6.
    let chain = chain_at(&fixture("noise_ktc.json"));
    let mut model = NoiseModel::new(&chain).unwrap();
    let band = noise::band_noise(&mut model, noise::DEFAULT_BAND, Weighting::A).unwrap();
    let k = chain.loads.iter().position(|l| l.id == "cap").unwrap();
    let (r_s, r_l, c, t) = (100.0, 100e9, 1e-6, 300.0);
    let r_p = r_s * r_l / (r_s + r_l);
    let density = |f: f64| {
        let w = 2.0 * std::f64::consts::PI * f * r_p * c;
        4.0 * 1.380649e-23 * t * r_p / (1.0 + w * w)
            * ampchain::noise::weighting::a_weighting_gain(f).powi(2)
    };
    let simpson = reference::noise::simpson_log(20.0, 20e3, 4000, density);
    let total = band.total(k);
    assert!(
        (total - simpson).abs() < 1e-6 * simpson,
        "{total} vs {simpson}"
    );
}

#[test]
fn band_integration_equals_simpson_on_demos_and_generated_chains() {
    // The adaptive Gauss–Kronrod band noise against composite Simpson in ln f (300
    // intervals, tests/reference/noise.rs; error about h⁴ ≈ 1e-8 on these smooth
    // spectra) on the same densities, every load's total, on every demo and 200
    // generated v2 chains, to 1e-6. With the densities held against the reference
    // network above (1e-9), this closes the band noise of those chains.
    let mut texts: Vec<String> = common::demo_chains()
        .iter()
        .map(|p| std::fs::read_to_string(p).unwrap())
        .collect();
    let mut rng = rand_chacha::ChaCha8Rng::seed_from_u64(61672);
    let mut generated = 0;
    while generated < 200 {
        let values: Vec<f64> = (0..256).map(|_| rng.random::<f64>()).collect();
        let text = serde_json::to_string(&reference::generate::generate_chain_v2(
            &mut reference::generate::Dice { values, next: 0 },
        ))
        .unwrap();
        if Chain::from_json_str(&text).is_ok_and(|c| c.evaluate().is_ok()) {
            texts.push(text);
            generated += 1;
        }
    }
    let mut worst: f64 = 0.0;
    for text in &texts {
        let chain = Chain::from_json_str(text).unwrap();
        let mut model = NoiseModel::new(&chain).unwrap();
        let band = noise::band_noise(&mut model, noise::DEFAULT_BAND, Weighting::None).unwrap();
        assert!(band.relative_error <= noise::TOLERANCE);
        let n = model.sources.len();
        let mut d = vec![0.0; model.density_len()];
        for k in 0..chain.loads.len() {
            let simpson = reference::noise::simpson_log(20.0, 20e3, 300, |f| {
                model.densities(f, 1.0, &mut d).unwrap();
                d[k * n..(k + 1) * n].iter().sum()
            });
            let total = band.total(k);
            let rel = (total - simpson).abs() / simpson;
            worst = worst.max(rel);
            assert!(
                rel < 1e-6,
                "load {k}: {total:e} vs Simpson {simpson:e}\n{text}"
            );
        }
    }
    println!(
        "{} chains: worst relative difference {worst:e}",
        texts.len()
    );
}

#[test]
fn a_ten_farad_coupling_integrates_at_its_rounding_floor() {
    // A 10 F coupling swamps the conductances at its nodes (6e4 S against 1e-5 S at
    // 1 kHz), so the densities are known to about 1e-7 only; the integration must stop
    // at that floor (a few dozen intervals here, where it used to halve to its 4000-interval
    // limit in 0.6 s, and `noise --optimum` or `spread --noise` ran for minutes). The
    // value must still be the physics: 10 F and 0.1 F are both shorts in the band
    // (under 0.1 Ω at 20 Hz against kilohms; common practice, no source), so the
    // totals agree to 1e-4.
    let demo = Path::new(env!("CARGO_MANIFEST_DIR")).join("chains/actuator-driver.json");
    let text = std::fs::read_to_string(demo).unwrap();
    let with = |c: &str| {
        let coupling = r#""to": "hv_gain", "coupling": "1u""#;
        assert!(text.contains(coupling), "the demo's pre → hv_gain coupling");
        let text = text.replace(coupling, &format!(r#""to": "hv_gain", "coupling": "{c}""#));
        let chain = Chain::from_json_str(&text).unwrap();
        let mut model = NoiseModel::new(&chain).unwrap();
        let split = noise::band_noise(&mut model, noise::DEFAULT_BAND, Weighting::None).unwrap();
        let totals = noise::band_load_totals(&mut model, noise::DEFAULT_BAND, Weighting::None);
        (split, totals.unwrap()[0])
    };
    let (huge, huge_total) = with("10 F");
    let (large, large_total) = with("100m");
    assert!(huge.points < 100 * 15, "{} points", huge.points);
    assert!(huge.relative_error < 1e-5, "{}", huge.relative_error);
    let (a, b) = (huge.total(0), large.total(0));
    assert!((a - b).abs() < 1e-4 * b, "{a} vs {b}");
    assert!((huge_total - large_total).abs() < 1e-4 * large_total);
}
