//! Preferred values (IEC 60063): tables, construction rules, rounding and bracketing.

use ampchain::eseries::{bracket, candidates, nearest, ESeriesError, Series};

/// Parse a list written as in the standard, in hundredths ("100 150 220" = 1.0 1.5 2.2).
fn hundredths(list: &str) -> Vec<f64> {
    list.split_whitespace()
        .map(|word| word.parse::<f64>().unwrap() / 100.0)
        .collect()
}

fn table_in_hundredths(series: Series) -> Vec<u32> {
    series
        .values()
        .iter()
        .map(|v| (v * 100.0).round() as u32)
        .collect()
}

#[test]
fn every_series_equals_the_iec_60063_list() {
    // IEC 60063 lists, transcribed a second time from memory in the standard's
    // three-digit form, independently of the tables in src/eseries.rs.
    let e6 = "100 150 220 330 470 680";
    let e12 = "100 120 150 180 220 270 330 390 470 560 680 820";
    let e24 = "100 110 120 130 150 160 180 200 220 240 270 300
               330 360 390 430 470 510 560 620 680 750 820 910";
    let e48 = "100 105 110 115 121 127 133 140 147 154 162 169
               178 187 196 205 215 226 237 249 261 274 287 301
               316 332 348 365 383 402 422 442 464 487 511 536
               562 590 619 649 681 715 750 787 825 866 909 953";
    let e96 = "100 102 105 107 110 113 115 118 121 124 127 130
               133 137 140 143 147 150 154 158 162 165 169 174
               178 182 187 191 196 200 205 210 215 221 226 232
               237 243 249 255 261 267 274 280 287 294 301 309
               316 324 332 340 348 357 365 374 383 392 402 412
               422 432 442 453 464 475 487 499 511 523 536 549
               562 576 590 604 619 634 649 665 681 698 715 732
               750 768 787 806 825 845 866 887 909 931 953 976";
    let e192 = "100 101 102 104 105 106 107 109 110 111 113 114
                115 117 118 120 121 123 124 126 127 129 130 132
                133 135 137 138 140 142 143 145 147 149 150 152
                154 156 158 160 162 164 165 167 169 172 174 176
                178 180 182 184 187 189 191 193 196 198 200 203
                205 208 210 213 215 218 221 223 226 229 232 234
                237 240 243 246 249 252 255 258 261 264 267 271
                274 277 280 284 287 291 294 298 301 305 309 312
                316 320 324 328 332 336 340 344 348 352 357 361
                365 370 374 379 383 388 392 397 402 407 412 417
                422 427 432 437 442 448 453 459 464 470 475 481
                487 493 499 505 511 517 523 530 536 542 549 556
                562 569 576 583 590 597 604 612 619 626 634 642
                649 657 665 673 681 690 698 706 715 723 732 741
                750 759 768 777 787 796 806 816 825 835 845 856
                866 876 887 898 909 920 931 942 953 965 976 988";
    for (series, list) in [
        (Series::E6, e6),
        (Series::E12, e12),
        (Series::E24, e24),
        (Series::E48, e48),
        (Series::E96, e96),
        (Series::E192, e192),
    ] {
        assert_eq!(series.values(), hundredths(list).as_slice(), "{series}");
    }
}

#[test]
fn value_counts_per_decade() {
    // IEC 60063: the E-N series has N values per decade.
    let counts: Vec<usize> = Series::ALL.iter().map(|s| s.values().len()).collect();
    assert_eq!(counts, vec![6, 12, 24, 48, 96, 192]);
    for series in Series::ALL {
        let values = series.values();
        // One decade, strictly ascending, from 1.0 to below 10.
        assert_eq!(values[0], 1.0, "{series}");
        assert!(values.windows(2).all(|w| w[0] < w[1]), "{series}");
        assert!(*values.last().unwrap() < 10.0, "{series}");
    }
}

#[test]
fn e24_differs_from_the_geometric_formula_exactly_at_the_known_values() {
    // IEC 60063 construction: E-N values are round(10^(i/N)) to the series' digits,
    // except the E24 values kept from older practice (handbook fact, from memory):
    // 2.7 3.0 3.3 3.6 3.9 4.3 4.7 8.2, where the formula gives 2.6 2.9 3.2 3.5 3.8 4.2 4.6 8.3.
    let mut differing = Vec::new();
    for (i, published) in table_in_hundredths(Series::E24).into_iter().enumerate() {
        let formula_tenths = (10f64.powf(i as f64 / 24.0) * 10.0).round() as u32;
        if formula_tenths * 10 != published {
            differing.push((published, formula_tenths * 10));
        }
    }
    assert_eq!(
        differing,
        vec![
            (270, 260),
            (300, 290),
            (330, 320),
            (360, 350),
            (390, 380),
            (430, 420),
            (470, 460),
            (820, 830),
        ]
    );
}

#[test]
fn three_digit_series_follow_the_formula_except_9_20_in_e192() {
    // IEC 60063 construction: round(10^(i/N), 2); the one published exception in the
    // three-digit series is E192's 9.20 where the formula gives 9.19 (from memory).
    for (series, expected) in [
        (Series::E48, vec![]),
        (Series::E96, vec![]),
        (Series::E192, vec![(920, 919)]),
    ] {
        let n = series.values().len() as f64;
        let mut differing = Vec::new();
        for (i, published) in table_in_hundredths(series).into_iter().enumerate() {
            let formula = (10f64.powf(i as f64 / n) * 100.0).round() as u32;
            if formula != published {
                differing.push((published, formula));
            }
        }
        assert_eq!(differing, expected, "{series}");
    }
}

#[test]
fn each_series_is_every_second_value_of_the_next() {
    // IEC 60063 construction: E6 ⊂ E12 ⊂ E24 and E48 ⊂ E96 ⊂ E192, each series
    // taking every second value of the finer one.
    for (coarse, fine) in [
        (Series::E6, Series::E12),
        (Series::E12, Series::E24),
        (Series::E48, Series::E96),
        (Series::E96, Series::E192),
    ] {
        let every_second: Vec<f64> = fine.values().iter().step_by(2).copied().collect();
        assert_eq!(
            coarse.values(),
            every_second.as_slice(),
            "{coarse} in {fine}"
        );
    }
}

#[test]
fn series_names_parse_and_display() {
    assert_eq!("E24".parse::<Series>(), Ok(Series::E24));
    assert_eq!("e24".parse::<Series>(), Ok(Series::E24));
    assert_eq!(" E192 ".parse::<Series>(), Ok(Series::E192));
    for series in Series::ALL {
        assert_eq!(series.to_string().parse::<Series>(), Ok(series));
    }
    let message = "E13".parse::<Series>().unwrap_err().to_string();
    assert!(message.contains("\"E13\""), "{message}");
    assert!(
        message.contains("E6, E12, E24, E48, E96, E192"),
        "{message}"
    );
    assert!("24".parse::<Series>().is_err());
    assert!("".parse::<Series>().is_err());
}

#[test]
fn every_member_is_recognised_in_many_decades() {
    // IEC 60063 values scaled by decades: each must bracket to itself, even when the
    // scaled value carries floating-point noise (1.1 × 100 = 110.00000000000001), and
    // come back as the f64 closest to the decimal value, i.e. what Rust's correctly
    // rounded parser gives for the text "1.1e2".
    for series in Series::ALL {
        for &m in series.values() {
            for k in -12..=9 {
                let value = m * 10f64.powi(k);
                let decimal: f64 = format!("{m}e{k}").parse().unwrap();
                let (low, high) = bracket(series, value).unwrap();
                assert_eq!(low, high, "{series} {value}");
                assert_eq!(low, decimal, "{series} {value}");
                assert_eq!(nearest(series, value).unwrap(), low, "{series} {value}");
            }
        }
    }
}

#[test]
fn exact_members_come_back_exact() {
    // IEC 60063 (E12/E24 contain 4.7, E24 contains 1.2): values are built from
    // integers, so they equal the decimal literal bit for bit.
    assert_eq!(bracket(Series::E12, 4.7e3).unwrap(), (4.7e3, 4.7e3));
    assert_eq!(bracket(Series::E12, 4699.9999999).unwrap(), (4.7e3, 4.7e3));
    assert_eq!(bracket(Series::E24, 4.7e6).unwrap(), (4.7e6, 4.7e6));
    assert_eq!(bracket(Series::E12, 0.0012).unwrap(), (0.0012, 0.0012));
    assert_eq!(nearest(Series::E24, 4.7e-9).unwrap(), 4.7e-9);
    assert_eq!(bracket(Series::E192, 9.2e3).unwrap(), (9.2e3, 9.2e3));
    assert_eq!(
        bracket(Series::E24, 110.00000000000001).unwrap(),
        (110.0, 110.0)
    );
    assert_eq!(nearest(Series::E24, 0.15000000000000002).unwrap(), 0.15);
}

#[test]
fn bracket_across_decade_edges() {
    // IEC 60063 tables (E12: … 6.8 8.2 | 10 12 …; E24: … 9.1 | 10 11 …).
    assert_eq!(bracket(Series::E12, 9.9e3).unwrap(), (8.2e3, 10e3));
    assert_eq!(bracket(Series::E12, 10e3).unwrap(), (10e3, 10e3));
    assert_eq!(bracket(Series::E12, 10.5e3).unwrap(), (10e3, 12e3));
    assert_eq!(bracket(Series::E24, 0.99).unwrap(), (0.91, 1.0));
    assert_eq!(bracket(Series::E24, 1.0).unwrap(), (1.0, 1.0));
    assert_eq!(bracket(Series::E192, 99.0).unwrap(), (98.8, 100.0));
    assert_eq!(bracket(Series::E6, 0.0012).unwrap(), (0.001, 0.0015));
    assert_eq!(bracket(Series::E48, 4.7e6).unwrap(), (4.64e6, 4.87e6));
}

#[test]
fn nearest_is_nearest_in_ratio() {
    // IEC 60063 series are geometric, so the boundary between two neighbours is their
    // geometric mean (common practice, no source): between 8.2 and 10 it is
    // √82 = 9.055, not the arithmetic 9.1.
    assert_eq!(nearest(Series::E12, 9.04e3).unwrap(), 8.2e3);
    assert_eq!(nearest(Series::E12, 9.08e3).unwrap(), 10e3); // arithmetic would give 8.2k
    assert_eq!(nearest(Series::E12, 9.9e3).unwrap(), 10e3);
    // E6 1.0 | 1.5: boundary √1.5 = 1.2247.
    assert_eq!(nearest(Series::E6, 0.0012).unwrap(), 0.001);
    assert_eq!(nearest(Series::E6, 0.00123).unwrap(), 0.0015);
    // E48 4.64 | 4.87: boundary √(4.64·4.87) = 4.7536.
    assert_eq!(nearest(Series::E48, 4.7e6).unwrap(), 4.64e6);
    assert_eq!(nearest(Series::E48, 4.76e6).unwrap(), 4.87e6);
    // E24 9.1 | 10 across the decade: boundary √91 = 9.539.
    assert_eq!(nearest(Series::E24, 0.95).unwrap(), 0.91);
    assert_eq!(nearest(Series::E24, 0.96).unwrap(), 1.0);
}

#[test]
fn candidates_around_a_value() {
    // IEC 60063 E12 table, across the decade edge.
    assert_eq!(
        candidates(Series::E12, 4.7e3, 2).unwrap(),
        vec![3.3e3, 3.9e3, 4.7e3, 5.6e3, 6.8e3]
    );
    assert_eq!(
        candidates(Series::E12, 5e3, 2).unwrap(),
        vec![3.9e3, 4.7e3, 5.6e3, 6.8e3]
    );
    assert_eq!(
        candidates(Series::E12, 9.9e3, 2).unwrap(),
        vec![6.8e3, 8.2e3, 10e3, 12e3]
    );
    assert_eq!(candidates(Series::E12, 5e3, 0).unwrap(), Vec::<f64>::new());
    assert_eq!(candidates(Series::E12, 4.7e3, 0).unwrap(), vec![4.7e3]);
    // Ten decades each way is the most a search may ask for.
    assert_eq!(candidates(Series::E6, 1.0, 60).unwrap().len(), 121);
    let message = candidates(Series::E6, 1.0, 61).unwrap_err().to_string();
    assert!(message.contains("61 E6 values"), "{message}");
}

#[test]
fn non_positive_or_non_finite_values_are_errors() {
    // A preferred value exists only for a positive finite quantity (common practice).
    for bad in [
        0.0,
        -0.0,
        -4.7e3,
        f64::NAN,
        f64::INFINITY,
        f64::NEG_INFINITY,
    ] {
        assert!(
            matches!(
                nearest(Series::E24, bad),
                Err(ESeriesError::NotPositive { .. })
            ),
            "{bad}"
        );
        assert!(bracket(Series::E24, bad).is_err(), "{bad}");
        assert!(candidates(Series::E24, bad, 2).is_err(), "{bad}");
    }
    let message = nearest(Series::E24, -1.0).unwrap_err().to_string();
    assert!(message.contains("-1"), "{message}");
    assert!(message.contains("positive finite"), "{message}");
    // Outside what f64 decades can hold: an error, not a panic or an infinite value.
    assert!(bracket(Series::E24, f64::MAX).is_err());
    assert!(bracket(Series::E24, 5e-324).is_err());
}
