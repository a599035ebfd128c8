use super::markup_check::check;
use super::*;

fn values(axis: &Axis) -> Vec<f64> {
    axis.ticks.iter().map(|t| t.value).collect()
}

fn loss_plot() -> LinePlot {
    let mut plot = LinePlot::new("Loss by step", "step", "loss (MSE)");
    plot.series.push(Series::new(
        "float",
        (0..50)
            .map(|i| (f64::from(i), 1.0 / f64::from(i + 1)))
            .collect(),
    ));
    plot.series.push(
        Series::new(
            "fixed point",
            (0..50)
                .map(|i| (f64::from(i), 1.1 / f64::from(i + 1)))
                .collect(),
        )
        .dashed(),
    );
    plot
}

#[test]
fn ticks_of_unit_range() {
    let a = linear_ticks(0.0, 1.0, 6);
    assert_eq!(values(&a), [0.0, 0.2, 0.4, 0.6, 0.8, 1.0]);
    assert_eq!(a.labels(), ["0.0", "0.2", "0.4", "0.6", "0.8", "1.0"]);
    assert_eq!((a.lo, a.hi), (0.0, 1.0));
}

#[test]
fn ticks_of_small_range() {
    let a = linear_ticks(0.001, 0.0031, 6);
    assert_eq!(
        a.labels(),
        ["0.0010", "0.0015", "0.0020", "0.0025", "0.0030", "0.0035"]
    );
    assert!(a.lo <= 0.001 && a.hi >= 0.0031);
    // Values are the nearest doubles to the decimals, not accumulated sums.
    assert_eq!(a.ticks[3].value, 0.0025);
}

#[test]
fn ticks_of_symmetric_range() {
    let a = linear_ticks(-5.0, 5.0, 6);
    assert_eq!(values(&a), [-6.0, -4.0, -2.0, 0.0, 2.0, 4.0, 6.0]);
    assert_eq!(a.labels(), ["-6", "-4", "-2", "0", "2", "4", "6"]);
    // Reversed bounds give the same axis.
    assert_eq!(linear_ticks(5.0, -5.0, 6), a);
}

#[test]
fn ticks_use_exponents_for_tiny_steps_and_huge_values() {
    let a = linear_ticks(0.0, 3e-5, 6);
    assert_eq!(
        a.labels(),
        ["0", "5.0e-6", "1.0e-5", "1.5e-5", "2.0e-5", "2.5e-5", "3.0e-5"]
    );
    let b = linear_ticks(1e6, 5e6, 4);
    assert_eq!(b.labels(), ["1e6", "2e6", "3e6", "4e6", "5e6"]);
}

#[test]
fn degenerate_ranges_are_widened() {
    for (lo, hi) in [
        (0.5, 0.5),
        (0.0, 0.0),
        (-3.0, -3.0),
        (f64::NAN, 1.0),
        (1e-300, 1e-300),
    ] {
        let a = linear_ticks(lo, hi, 5);
        assert!(a.hi > a.lo, "{lo}..{hi} gave {a:?}");
        assert!(a.ticks.len() >= 2, "{lo}..{hi} gave {a:?}");
        assert!(a.ticks.iter().all(|t| t.value.is_finite()));
        if lo.is_finite() {
            assert!(a.lo <= lo && a.hi >= hi, "{lo} outside {a:?}");
        }
    }
}

#[test]
fn log_ticks_by_decade() {
    let a = log_ticks(1e-6, 1.0);
    assert!(a.log);
    assert_eq!(
        a.labels(),
        ["1e-6", "1e-5", "1e-4", "1e-3", "1e-2", "1e-1", "1e0"]
    );
    assert_eq!(a.ticks.len(), 7, "no minor ticks over six decades");
    assert_eq!((a.lo, a.hi), (1e-6, 1.0));

    let b = log_ticks(0.02, 0.5);
    assert_eq!(b.labels(), ["0.01", "0.1", "1"]);
    assert!(b.ticks.iter().any(|t| t.label.is_none() && t.value == 0.05));

    let c = log_ticks(0.2, 0.9);
    assert_eq!(c.labels(), ["0.1", "0.2", "0.5", "1"]);

    let d = log_ticks(1e-20, 1e20);
    assert_eq!(d.labels().first(), Some(&"1e-20"));
    assert_eq!(d.labels().len(), 9, "every 5th decade");
    // Non-positive bounds fall back rather than produce NaN.
    assert_eq!(log_ticks(0.0, -1.0).labels(), ["1", "2", "5", "10"]);
    let e = log_ticks(1.0, 1.0);
    assert!(e.lo < 1.0 && e.hi > 1.0);
}

#[test]
fn line_plot_is_well_formed() {
    let svg = loss_plot().to_svg();
    let n = check(&svg, &[]).unwrap();
    assert!(n > 20, "only {n} elements");
    assert!(svg.starts_with("<svg xmlns=\"http://www.w3.org/2000/svg\""));
    assert!(svg.contains("viewBox=\"0 0 720.0 420.0\""));
    assert!(svg.contains(">float</text>") && svg.contains(">fixed point</text>"));
    assert!(svg.contains("stroke-dasharray=\"7 4\""));
    assert_eq!(svg.matches("<polyline").count(), 2);
    for banned in ["<script", "href", "url(", "@import", "id=\""] {
        assert!(!svg.contains(banned), "{banned} in plot");
    }
}

#[test]
fn styles_stay_apart_without_colour() {
    let series: Vec<Series> = (0..7)
        .map(|i| {
            let s = Series::new(format!("s{i}"), vec![(0.0, 1.0)]);
            if i % 2 == 1 {
                s.dashed()
            } else {
                s
            }
        })
        .collect();
    let styles = series_styles(&series);
    for (i, a) in styles.iter().enumerate() {
        for b in &styles[i + 1..] {
            assert!(
                a.colour != b.colour || a.dash != b.dash,
                "two series look alike: {a:?}"
            );
        }
    }
    // Dashed series are dashed, distinctly; the first three solid ones are solid.
    assert_eq!(styles[1].dash, Some("7 4"));
    assert_eq!(styles[3].dash, Some("2 3"));
    assert_eq!(styles[0].dash, None);
    assert_eq!(styles[4].dash, None);
    assert!(styles[6].dash.is_some());
}

#[test]
fn nan_and_infinite_points_break_the_line() {
    let mut plot = LinePlot::new("t", "x", "y");
    plot.series.push(Series::new(
        "gappy",
        vec![
            (0.0, 1.0),
            (1.0, 2.0),
            (2.0, f64::NAN),
            (3.0, 3.0),
            (f64::INFINITY, 1.0),
            (5.0, 2.0),
            (6.0, 1.0),
        ],
    ));
    plot.series.push(Series::new(
        "empty",
        vec![(0.0, f64::NAN), (1.0, f64::NEG_INFINITY)],
    ));
    let svg = plot.to_svg();
    check(&svg, &[]).unwrap();
    // Runs: [0,1], [3] (a dot), [5,6].
    assert_eq!(svg.matches("<polyline").count(), 2);
    assert_eq!(svg.matches("<circle").count(), 1);
    assert!(svg.contains(">empty (no data)</text>"));
    assert!(!svg.contains(">gappy (no data)"));
    assert!(!svg.contains("NaN") && !svg.contains("inf"));
    assert!(!svg.contains(">no data</text>"), "the plot has data");
}

#[test]
fn plot_without_any_data_says_so() {
    let mut plot = LinePlot::new("", "", "");
    plot.series
        .push(Series::new("a", vec![(f64::NAN, f64::NAN)]));
    let svg = plot.to_svg();
    check(&svg, &[]).unwrap();
    assert!(svg.contains(">no data</text>"));
    assert!(svg.contains(">a (no data)</text>"));
    let bare = LinePlot::new("", "", "").to_svg();
    check(&bare, &[]).unwrap();
    assert!(bare.contains(">no data</text>"));
}

#[test]
fn log_scale_skips_non_positive_values() {
    let mut plot = LinePlot::new("t", "step", "loss");
    plot.log_y = true;
    plot.series.push(Series::new(
        "loss",
        vec![
            (0.0, 1.0),
            (1.0, 0.1),
            (2.0, 0.0),
            (3.0, -1.0),
            (4.0, 1e-3),
            (5.0, 1e-4),
        ],
    ));
    let svg = plot.to_svg();
    check(&svg, &[]).unwrap();
    assert_eq!(svg.matches("<polyline").count(), 2);
    assert!(!svg.contains("NaN") && !svg.contains("inf"));
    assert!(svg.contains(">1e-4</text>") && svg.contains(">1e0</text>"));
}

#[test]
fn degenerate_data_draws_without_nan() {
    let mut one = LinePlot::new("one point", "x", "y");
    one.series.push(Series::new("p", vec![(3.0, 7.0)]));
    let mut flat = LinePlot::new("flat", "x", "y");
    flat.series.push(Series::new(
        "f",
        (0..10).map(|i| (f64::from(i), 0.25)).collect(),
    ));
    let mut flat_log = flat.clone();
    flat_log.log_y = true;
    for plot in [one, flat, flat_log] {
        let svg = plot.to_svg();
        check(&svg, &[]).unwrap();
        assert!(
            !svg.contains("NaN") && !svg.contains("inf"),
            "{}",
            plot.title
        );
    }
}

#[test]
fn text_is_escaped() {
    let nasty = "<a & \"b\"> 'c'";
    let mut plot = LinePlot::new(nasty, nasty, nasty);
    plot.series
        .push(Series::new(nasty, vec![(0.0, 1.0), (1.0, 2.0)]));
    let svg = plot.to_svg();
    check(&svg, &[]).unwrap();
    assert!(!svg.contains("<a "));
    assert!(svg.contains("&lt;a &amp; &quot;b&quot;&gt; &apos;c&apos;"));

    let mut scatter = ScatterPlot::new(nasty, nasty, nasty);
    scatter.points.push(Point::new(1.0, 1.0).highlighted(nasty));
    scatter.points.push(Point::new(2.0, 0.5).highlighted("x<y"));
    let svg = scatter.to_svg();
    check(&svg, &[]).unwrap();
    assert!(svg.contains(">x&lt;y</text>"));
    assert_eq!(escape_xml("a\u{1}b"), "a\u{fffd}b");
}

#[test]
fn same_input_same_bytes() {
    assert_eq!(loss_plot().to_svg(), loss_plot().to_svg());
    let scatter = || {
        let mut s = ScatterPlot::new("front", "RAM (bytes)", "drift (pp)");
        for i in 0..20 {
            let x = f64::from(i * 512);
            let p = Point::new(x, 10.0 / f64::from(i + 1));
            s.points.push(if i % 4 == 0 {
                p.highlighted(format!("cfg {i}"))
            } else {
                p
            });
        }
        s
    };
    assert_eq!(scatter().to_svg(), scatter().to_svg());
}

#[test]
fn scatter_joins_highlighted_points_in_x_order() {
    let mut s = ScatterPlot::new("front", "RAM (bytes)", "drift (pp)");
    s.points.push(Point::new(3000.0, 0.5).highlighted("c"));
    s.points.push(Point::new(1000.0, 2.0).highlighted("a"));
    s.points.push(Point::new(2000.0, 3.0));
    s.points.push(Point::new(2000.0, 1.0).highlighted("b"));
    s.points.push(Point::new(f64::NAN, 1.0));
    let svg = s.to_svg();
    check(&svg, &[]).unwrap();
    assert_eq!(
        svg.matches("<circle").count(),
        4,
        "the NaN point is left out"
    );
    assert_eq!(svg.matches(&format!("r=\"{HIGHLIGHT_RADIUS}\"")).count(), 3);
    let line = svg
        .lines()
        .find(|l| l.starts_with("<polyline"))
        .expect("front line");
    let points = line
        .split("points=\"")
        .nth(1)
        .unwrap()
        .trim_end_matches("\"/>");
    let xs: Vec<f64> = points
        .split(' ')
        .map(|p| p.split(',').next().unwrap().parse().unwrap())
        .collect();
    assert_eq!(xs.len(), 3);
    assert!(xs.windows(2).all(|w| w[0] < w[1]), "{xs:?}");

    s.connect_highlighted = false;
    assert!(!s.to_svg().contains("<polyline"));
}

#[test]
fn labels_stay_inside_and_apart() {
    let area = Rect {
        x0: 50.0,
        y0: 40.0,
        x1: 400.0,
        y1: 300.0,
    };
    let labels = vec![
        // At the right edge: must go left.
        (398.0, 100.0, "rightmost config".to_string()),
        // At the top-left corner: must go right and below.
        (52.0, 42.0, "corner".to_string()),
        // Two points close together: labels must not collide.
        (200.0, 200.0, "first".to_string()),
        (204.0, 203.0, "second".to_string()),
        // Longer than the whole area: shortened.
        (220.0, 150.0, "x".repeat(100)),
    ];
    let markers: Vec<(f64, f64)> = labels.iter().map(|l| (l.0, l.1)).collect();
    let placed = place_labels(&labels, &markers, area);
    assert_eq!(placed.len(), labels.len());
    for p in &placed {
        assert!(p.bounds.inside(&area), "{p:?} leaves the area");
    }
    for (i, a) in placed[..4].iter().enumerate() {
        for b in &placed[i + 1..4] {
            assert!(!a.bounds.overlaps(&b.bounds), "{a:?} covers {b:?}");
        }
    }
    assert!(placed[0].x < 398.0);
    assert!(placed[4].text.ends_with('…'));
}

#[test]
fn empty_scatter_is_well_formed() {
    let svg = ScatterPlot::new("nothing", "x", "y").to_svg();
    check(&svg, &[]).unwrap();
    assert!(svg.contains(">no data</text>"));
}

#[test]
fn checker_rejects_broken_markup() {
    assert!(check("<svg><g></svg>", &[]).is_err());
    assert!(check("<svg>a & b</svg>", &[]).is_err());
    assert!(check("<svg x=1></svg>", &[]).is_err());
    assert!(check("<svg></svg><svg></svg>", &[]).is_err());
    assert!(check("<svg>1 > 0</svg>", &[]).is_err());
    assert_eq!(check("<svg a=\"&lt;\"><g/></svg>", &[]), Ok(2));
}
