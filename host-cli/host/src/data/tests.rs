use super::*;

fn spec(target: &str, ignore: &[&str], task: Task) -> DataSpec {
    DataSpec {
        features: FeatureSelect::AllOther,
        target: vec![target.to_string()],
        ignore: ignore.iter().map(|s| s.to_string()).collect(),
        task,
    }
}

fn load(text: &str, spec: &DataSpec) -> Result<Dataset, DataError> {
    Dataset::from_bytes(Path::new("t.csv"), text.as_bytes(), spec, None)
}

#[test]
fn reads_features_and_targets() {
    let d = load(
        "unit,raw,temp,vwc\n1,1647,7.16,0.3841\n# a comment\n\n2, 2316 ,32.64,0.14",
        &spec("vwc", &["unit"], Task::Regression),
    )
    .unwrap();
    assert_eq!(d.features, ["raw", "temp"]);
    assert_eq!(d.x, Rows::from_rows(2, [[1647.0, 7.16], [2316.0, 32.64]]));
    assert_eq!(d.x.values(), [1647.0, 7.16, 2316.0, 32.64]);
    assert_eq!(
        d.target,
        Targets::Values {
            names: vec!["vwc".into()],
            y: Rows::from_rows(1, [[0.3841], [0.14]])
        }
    );
}

#[test]
fn rows_hold_their_values_row_after_row() {
    let mut r = Rows::with_capacity(3, 2);
    assert!(r.is_empty());
    r.push(&[1.0, 2.0, 3.0]);
    r.push(&[4.0, 5.0, 6.0]);
    r.push(&[7.0, 8.0, 9.0]);
    assert_eq!((r.width(), r.len()), (3, 3));
    assert_eq!(r.row(1), [4.0, 5.0, 6.0]);
    r[2][0] = -7.0;
    assert_eq!(r.values(), [1.0, 2.0, 3.0, 4.0, 5.0, 6.0, -7.0, 8.0, 9.0]);
    let picked = r.select(&[2, 0, 2]);
    assert_eq!(
        picked,
        Rows::from_rows(3, [[-7.0, 8.0, 9.0], [1.0, 2.0, 3.0], [-7.0, 8.0, 9.0]])
    );
    assert_eq!(
        r.head(2),
        Rows::from_rows(3, [[1.0, 2.0, 3.0], [4.0, 5.0, 6.0]])
    );
    assert_eq!(r.head(9), r);
    assert_eq!(r.iter().next_back(), Some(&[-7.0, 8.0, 9.0][..]));
    // Rows of no values still count.
    let empty = Rows::from_rows(0, [[0.0; 0]; 4]);
    assert_eq!((empty.len(), empty.iter().count()), (4, 4));
    assert!(empty.iter().all(<[f64]>::is_empty));
}

#[test]
fn class_errors_come_after_a_bad_number_on_a_later_line() {
    // Labels are turned into ids while the file is read, but a class error, which only
    // the whole file decides, is still reported after any malformed number, as when the
    // labels were kept as text to the end.
    let classes: Vec<String> = ["0", "1"].iter().map(|s| s.to_string()).collect();
    let s = spec("zone", &[], Task::Classification);
    let text = b"a,zone\n1,7\n2,8\nx,1\n";
    let e = Dataset::from_bytes(Path::new("c.csv"), text, &s, Some(&classes)).unwrap_err();
    assert!(matches!(e, DataError::NotNumber { line: 4, .. }), "{e}");
    let e = Dataset::from_bytes(Path::new("c.csv"), &text[..15], &s, Some(&classes)).unwrap_err();
    assert!(
        matches!(&e, DataError::UnknownClass { line: 2, value, .. } if value == "7"),
        "{e}"
    );
}

#[test]
fn more_classes_than_a_u16_numbers_are_refused() {
    let s = spec("k", &[], Task::Classification);
    let mut text = String::from("a,k\n");
    for i in 0..MAX_CLASSES {
        text.push_str(&format!("1,c{i}\n"));
    }
    let d = load(&text, &s).unwrap();
    let Targets::Classes { names, labels } = &d.target else {
        panic!("classification targets expected")
    };
    assert_eq!(
        (names.len(), labels[MAX_CLASSES - 1]),
        (MAX_CLASSES, u16::MAX)
    );
    assert_eq!(names[MAX_CLASSES - 1], format!("c{}", MAX_CLASSES - 1));
    text.push_str("1,one-more\n");
    let e = load(&text, &s).unwrap_err();
    assert!(matches!(e, DataError::TooManyClasses { .. }), "{e}");
}

#[test]
fn lines_count_comments_and_blank_lines() {
    let text = "# probe 7\n\na,y\n# bench run 2\n1,2\n\n  \n# end\n3,x\n";
    let e = load(text, &spec("y", &[], Task::Regression)).unwrap_err();
    assert!(matches!(e, DataError::NotNumber { line: 9, .. }), "{e}");
    let e = load("# c\n  \na,a\n1,2\n", &spec("y", &[], Task::Regression)).unwrap_err();
    assert!(
        matches!(e, DataError::DuplicateColumn { line: 3, .. }),
        "{e}"
    );
}

#[test]
fn named_features_keep_their_order() {
    let s = DataSpec {
        features: FeatureSelect::Named(vec!["b".into(), "a".into()]),
        target: vec!["y".into(), "z".into()],
        ignore: vec![],
        task: Task::Regression,
    };
    let d = load("a,b,c,y,z\n1,2,x,3,4\n", &s).unwrap();
    assert_eq!(d.features, ["b", "a"]);
    assert_eq!(d.x, Rows::from_rows(2, [[2.0, 1.0]]));
    assert_eq!(d.target.outputs(), 2);
}

#[test]
fn every_spelling_of_nan_and_infinity_is_refused() {
    for bad in ["nan", "NaN", "inf", "-inf", "+Infinity", "INF", "1e999"] {
        let e = load(
            &format!("a,y\n1,2\n{bad},3\n"),
            &spec("y", &[], Task::Regression),
        )
        .unwrap_err();
        assert!(
            matches!(e, DataError::NotFinite { line: 3, .. }),
            "{bad}: {e}"
        );
        assert!(e.to_string().contains("line 3, column `a`"), "{e}");
    }
}

#[test]
fn integer_classes_sort_by_value() {
    let d = load(
        "a,zone\n1,10\n2,2\n3,03\n4,2\n",
        &spec("zone", &[], Task::Classification),
    )
    .unwrap();
    assert_eq!(
        d.target,
        Targets::Classes {
            names: vec!["2".into(), "3".into(), "10".into()],
            labels: vec![2, 0, 1, 0]
        }
    );
}

#[test]
fn text_classes_keep_first_appearance() {
    let d = load(
        "a,state\n1,wet\n2,dry\n3,wet\n4,moist\n",
        &spec("state", &[], Task::Classification),
    )
    .unwrap();
    assert_eq!(d.classes().unwrap(), ["wet", "dry", "moist"]);
    let Targets::Classes { labels, .. } = &d.target else {
        panic!("classification targets expected")
    };
    assert_eq!(labels, &[0, 1, 0, 2]);
}

#[test]
fn given_classes_fix_the_mapping_and_allow_one_class() {
    let classes: Vec<String> = ["0", "1", "2", "3"].iter().map(|s| s.to_string()).collect();
    let s = spec("zone", &[], Task::Classification);
    let d = Dataset::from_bytes(
        Path::new("c.csv"),
        b"a,zone\n1,2\n2,2\n",
        &s,
        Some(&classes),
    )
    .unwrap();
    let Targets::Classes { names, labels } = &d.target else {
        panic!("classification targets expected")
    };
    assert_eq!(names, &classes);
    assert_eq!(labels, &[2, 2]);
    let e = Dataset::from_bytes(
        Path::new("c.csv"),
        b"a,zone\n1,2\n2,7\n",
        &s,
        Some(&classes),
    )
    .unwrap_err();
    assert!(matches!(e, DataError::UnknownClass { line: 3, .. }), "{e}");
}

#[test]
fn check_features_names_the_difference() {
    let d = load("a,b,y\n1,2,3\n", &spec("y", &[], Task::Regression)).unwrap();
    assert!(d.check_features(&["a".into(), "b".into()]).is_ok());
    let e = d.check_features(&["b".into(), "a".into()]).unwrap_err();
    assert!(
        e.to_string().contains("feature 1 should be `b` but is `a`"),
        "{e}"
    );
    let e = d.check_features(&["a".into(), "c".into()]).unwrap_err();
    let text = e.to_string();
    assert!(
        text.contains("missing `c`") && text.contains("not in the model `b`"),
        "{text}"
    );
}

fn data(x: Vec<Vec<f64>>, features: &[&str]) -> Dataset {
    let n = x.len();
    Dataset {
        source: PathBuf::from("m.csv"),
        features: features.iter().map(|s| s.to_string()).collect(),
        x: Rows::from_rows(features.len(), x),
        target: Targets::Values {
            names: vec!["y".into()],
            y: Rows::from_rows(1, vec![[0.0]; n]),
        },
    }
}

#[test]
fn standardize_gives_zero_mean_unit_std() {
    // Column a: 1, 2, 3, 6 has mean 3, population variance (4+1+0+9)/4 = 3.5.
    let mut d = data(
        vec![
            vec![1.0, 5.0],
            vec![2.0, 5.0],
            vec![3.0, 5.0],
            vec![6.0, 5.0],
        ],
        &["a", "b"],
    );
    let s = Scaling::fit_standardize(&d).unwrap();
    assert_eq!(s.scales[0].offset, 3.0);
    assert_eq!(s.scales[0].gain, (1.0 / 3.5f64.sqrt()) as f32);
    assert_eq!(
        s.scales[1],
        ChannelScale {
            offset: 5.0,
            gain: 1.0
        }
    );
    assert_eq!(s.constant.len(), 1);
    assert_eq!(s.constant[0].columns, "b");
    s.apply(&mut d).unwrap();
    let col: Vec<f64> = d.x.iter().map(|r| r[0]).collect();
    let mean = col.iter().sum::<f64>() / 4.0;
    let var = col.iter().map(|v| (v - mean).powi(2)).sum::<f64>() / 4.0;
    assert!(mean.abs() < 1e-6, "{mean}");
    assert!((var - 1.0).abs() < 1e-6, "{var}");
    assert!(d.x.iter().all(|r| r[1] == 0.0));
}

#[test]
fn statistics_of_huge_values_do_not_overflow() {
    // The direct sums of squares would reach 1e600: beyond f64, so the spread was taken
    // as infinite and the channel as constant. Scaled by a power of two they stay exact.
    let rows = Rows::from_rows(1, [[1e300], [-1e300], [3e300], [-3e300]]);
    let (mean, std) = mean_std(&rows, &(0..1)).unwrap();
    assert_eq!(mean, 0.0);
    // Population variance (1 + 1 + 9 + 9) / 4 = 5, times 1e600.
    let want = 5f64.sqrt() * 1e300;
    assert!((std - want).abs() <= 1e-15 * want, "{std} vs {want}");
    // For ordinary values the result is that of the direct computation, bit for bit.
    let rows = Rows::from_rows(1, [[1647.0], [2316.0], [1980.5], [2104.25]]);
    let direct_mean = (1647.0 + 2316.0 + 1980.5 + 2104.25) / 4.0;
    let direct_var = rows
        .iter()
        .map(|r| (r[0] - direct_mean) * (r[0] - direct_mean))
        .sum::<f64>()
        / 4.0;
    assert_eq!(
        mean_std(&rows, &(0..1)),
        Some((direct_mean, direct_var.sqrt()))
    );
    assert_eq!(mean_std(&Rows::new(1), &(0..1)), None);
}

#[test]
fn unscalable_columns_are_errors_naming_file_and_column() {
    // A spread of 1e200 needs a gain of 1e-200: zero in f32. A mean of 1e300 is beyond the
    // f32 offset. Neither may pass as a "constant" channel with gain 1.
    for (values, why) in [
        ([1e200, -1e200, 0.0], "gain"),
        ([1e300, 1e300, 1e300], "offset"),
    ] {
        let d = data(
            values
                .iter()
                .map(|&v: &f64| vec![1.0 + v.signum(), v])
                .collect(),
            &["raw_counts", "temp_c"],
        );
        let e = Scaling::fit_standardize(&d).unwrap_err();
        assert!(
            matches!(&e, DataError::Unscalable { channel: 1, columns, .. } if columns == "temp_c"),
            "{e:?}"
        );
        let text = e.to_string();
        assert!(
            text.starts_with(&format!("{}: column `temp_c`", d.source.display())),
            "{text}"
        );
        assert!(text.contains(why), "{text}");
    }
    // Large but storable values scale normally.
    let d = data(vec![vec![1e30], vec![3e30]], &["a"]);
    let s = Scaling::fit_standardize(&d).unwrap();
    let mean = (1e30f64 + 3e30) / 2.0;
    let std = (((1e30 - mean) * (1e30 - mean) + (3e30 - mean) * (3e30 - mean)) / 2.0).sqrt();
    assert_eq!(s.scales[0].offset, mean as f32);
    assert_eq!(s.scales[0].gain, (1.0 / std) as f32);
    assert!((s.scales[0].gain as f64 * 1e30 - 1.0).abs() < 1e-6);
    assert!(s.constant.is_empty());
}

#[test]
fn per_channel_pools_each_run_of_columns() {
    // Two channels of two samples: channel 0 = columns 0-1, channel 1 = columns 2-3.
    let d = data(
        vec![vec![0.0, 2.0, 10.0, 10.0], vec![4.0, 6.0, 30.0, 30.0]],
        &["a0", "a1", "b0", "b1"],
    );
    let s = Scaling::fit_per_channel(&d, 2).unwrap();
    // Channel 0 values 0, 2, 4, 6: mean 3, variance (9+1+1+9)/4 = 5.
    assert_eq!(s.scales[0].offset, 3.0);
    assert_eq!(s.scales[0].gain, (1.0 / 5f64.sqrt()) as f32);
    // Channel 1 values 10, 10, 30, 30: mean 20, std 10.
    assert_eq!(
        s.scales[1],
        ChannelScale {
            offset: 20.0,
            gain: 0.1
        }
    );
    assert!(s.constant.is_empty());
    assert!(Scaling::fit_per_channel(&d, 3).is_err());
    assert!(Scaling::fit_per_channel(&d, 0).is_err());
    let mut d2 = d.clone();
    assert!(apply(&s.scales[..1], &mut d2).is_ok());
    assert!(apply(&s.scales[..1], &mut d2.clone()).is_ok());
    // Three scales do not divide four features.
    let three = [s.scales[0], s.scales[0], s.scales[0]];
    assert!(apply(&three, &mut d2.clone()).is_err());
    // No scales (`standardize = false`) leave the data unchanged.
    let before = d2.x.clone();
    assert!(apply(&[], &mut d2).is_ok());
    assert_eq!(d2.x, before);
}

fn classes(labels: &[u16], names: usize) -> Dataset {
    Dataset {
        source: PathBuf::from("k.csv"),
        features: vec!["a".into()],
        x: Rows::from_rows(1, (0..labels.len()).map(|i| [i as f64])),
        target: Targets::Classes {
            names: (0..names).map(|i| i.to_string()).collect(),
            labels: labels.to_vec(),
        },
    }
}

#[test]
fn split_is_stratified_deterministic_and_complete() {
    let labels: Vec<u16> = (0..100).map(|i| if i < 80 { 0 } else { 1 }).collect();
    let d = classes(&labels, 2);
    let (train, hold) = split(&d, 0.25, 9).unwrap();
    let count = |ds: &Dataset, c: u16| match &ds.target {
        Targets::Classes { labels, .. } => labels.iter().filter(|&&l| l == c).count(),
        Targets::Values { .. } => 0,
    };
    assert_eq!((count(&hold, 0), count(&hold, 1)), (20, 5));
    assert_eq!((count(&train, 0), count(&train, 1)), (60, 15));
    // Every row lands in exactly one part, in file order.
    let mut all: Vec<f64> = train.x.iter().chain(&hold.x).map(|r| r[0]).collect();
    assert!(train.x.values().windows(2).all(|w| w[0] < w[1]));
    all.sort_by(f64::total_cmp);
    assert_eq!(all, (0..100).map(f64::from).collect::<Vec<_>>());
    assert_eq!(split(&d, 0.25, 9).unwrap(), (train.clone(), hold.clone()));
    let (_, other) = split(&d, 0.25, 10).unwrap();
    assert_ne!(other, hold);
    assert!(split(&d, 1.0, 0).is_err());
    assert!(split(&d, -0.1, 0).is_err());
    assert!(split(&d, f64::NAN, 0).is_err());
}

#[test]
fn split_keeps_a_training_row_per_class() {
    let d = classes(&[0, 1, 1], 2);
    let (train, hold) = split(&d, 0.9, 1).unwrap();
    assert_eq!(train.len(), 2);
    assert_eq!(hold.len(), 1);
    let (train, hold) = split(&d, 0.0, 1).unwrap();
    assert_eq!((train.len(), hold.len()), (3, 0));
}
