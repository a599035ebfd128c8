#[test]
fn short_decimals() {
    assert_eq!(super::short_decimal(0.050000011920928955), "0.05");
    assert_eq!(super::short_decimal(0.8999999761581421), "0.9");
    assert_eq!(super::short_decimal(1234.5678), "1234.57");
    assert_eq!(super::short_decimal(0.0), "0");
    assert_eq!(super::short_decimal(2.0e-7), "0.0000002");
}

use std::fs;

use super::*;
use crate::plot::markup_check::check;
use crate::plot::{LinePlot, Series};

fn sample() -> Report {
    let mut plot = LinePlot::new("Loss", "step", "loss");
    plot.series
        .push(Series::new("float", vec![(0.0, 1.0), (1.0, 0.5)]));
    let mut table = Table::new(
        ["format", "Δ loss", "RAM (bytes)"],
        vec![Align::Left, Align::Right, Align::Right],
    );
    table.push_row(["Q7 | master Q15", "0.012", "1 024"]);
    table.push_row(["Q15", "0.003", "2 048"]);
    Report {
        title: "Drift <check> & more".into(),
        subtitle: Some("seed 7, 200 steps".into()),
        sections: vec![
            Section {
                heading: "Summary".into(),
                blocks: vec![
                    Block::Verdict {
                        pass: false,
                        text: "drift 3.1 pp > limit 2 pp".into(),
                    },
                    Block::Paragraph("first line\nsecond *line*".into()),
                    Block::KeyValues(vec![("seed".into(), "7".into())]),
                ],
            },
            Section {
                heading: "Details".into(),
                blocks: vec![
                    Block::Table(table),
                    Block::Figure {
                        svg: plot.to_svg(),
                        caption: "Loss by step".into(),
                        file_stem: "loss".into(),
                    },
                    Block::Figure {
                        svg: format!("<?xml version=\"1.0\"?>\n{}", plot.to_svg()),
                        caption: "Again".into(),
                        file_stem: "loss".into(),
                    },
                    Block::Code("hone drift --seed 7 <in.csv>".into()),
                ],
            },
        ],
    }
}

fn entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

#[test]
fn html_is_self_contained_and_escaped() {
    let html = sample().to_html();
    check(&html, &["meta"]).unwrap();
    assert!(html.starts_with("<!DOCTYPE html>"));
    assert!(html.contains("<title>Drift &lt;check&gt; &amp; more</title>"));
    assert!(html.contains("hone drift --seed 7 &lt;in.csv&gt;"));
    assert!(!html.contains("<check>") && !html.contains("<?xml"));
    for banned in ["<script", "<link", "src=", "href", "url(", "@import"] {
        assert!(!html.contains(banned), "{banned} in page");
    }
    assert_eq!(html.matches("<svg ").count(), 2);
    assert!(html.contains("<strong>Figure 2.</strong> Again"));
}

#[test]
fn html_tables_align_numbers_right_and_verdict_is_marked() {
    let html = sample().to_html();
    assert!(html.contains("<th scope=\"col\">format</th><th scope=\"col\" class=\"r\">Δ loss</th>"));
    assert!(html.contains("<td>Q7 | master Q15</td><td class=\"r\">0.012</td>"));
    assert!(html.contains("<div class=\"verdict fail\" role=\"status\"><span class=\"mark\">FAIL ✗</span>drift 3.1 pp &gt; limit 2 pp</div>"));
    let mut pass = Report::new("t");
    pass.sections.push(Section {
        heading: "h".into(),
        blocks: vec![Block::Verdict {
            pass: true,
            text: "ok".into(),
        }],
    });
    let html = pass.to_html();
    check(&html, &["meta"]).unwrap();
    assert!(html.contains("class=\"verdict pass\"") && html.contains("PASS ✓"));
    assert!(!html.contains("FAIL"));
}

#[test]
fn markdown_tables_escape_pipes_and_figures_link_files() {
    let (md, files) = sample().to_markdown("figures");
    assert!(md.starts_with("# Drift \\<check\\> \\& more\n"));
    assert!(md.contains("| format | Δ loss | RAM (bytes) |\n| :--- | ---: | ---: |\n"));
    assert!(md.contains("| Q7 \\| master Q15 | 0.012 | 1 024 |\n"));
    assert!(md.contains("![Loss by step](figures/loss.svg)"));
    assert!(md.contains("![Again](figures/loss-2.svg)"));
    assert!(md.contains("*Figure 2.* Again"));
    assert!(md.contains("> **FAIL ✗** drift 3.1 pp \\> limit 2 pp\n"));
    assert!(md.contains("first line\\\nsecond \\*line\\*\n"));
    assert!(md.contains("```text\nhone drift --seed 7 <in.csv>\n```\n"));
    assert!(md.contains("- **seed:** 7\n"));
    let names: Vec<&str> = files.iter().map(|(n, _)| n.as_str()).collect();
    assert_eq!(names, ["loss.svg", "loss-2.svg"]);
    assert!(files.iter().all(|(_, svg)| svg.starts_with("<svg ")));
    // Every row of a table has as many cells as its header: escaped pipes do not count.
    let table: Vec<&str> = md.lines().filter(|l| l.starts_with('|')).collect();
    let cells = |l: &str| l.replace("\\|", "").matches('|').count();
    assert!(table.iter().all(|l| cells(l) == 4), "{table:?}");

    let (flat, _) = sample().to_markdown("");
    assert!(flat.contains("![Loss by step](loss.svg)"));
}

#[test]
fn markdown_guards_line_starts_fences_and_file_names() {
    let mut r = Report::new("t");
    r.sections.push(Section {
        heading: "h".into(),
        blocks: vec![
            Block::Paragraph("# not a heading\n- not a list\n3. not a list either".into()),
            Block::Code("a ``` b".into()),
            Block::Figure {
                svg: "<svg xmlns=\"http://www.w3.org/2000/svg\"/>".into(),
                caption: "c [x](y)".into(),
                file_stem: "../up one".into(),
            },
        ],
    });
    let (md, files) = r.to_markdown("my figs");
    assert!(md.contains("\\# not a heading\\\n\\- not a list\\\n3\\. not a list either\n"));
    assert!(md.contains("````text\na ``` b\n````\n"));
    assert_eq!(files[0].0, "---up-one.svg");
    assert!(md.contains("![c \\[x\\](y)](my%20figs/---up-one.svg)"));
}

#[test]
fn text_table_counts_characters_not_bytes() {
    let mut t = Table::new(["name", "Δ µs"], vec![Align::Left, Align::Right]);
    t.push_row(["×2 ≤ limit", "5"]);
    t.push_row(["b", "12.5"]);
    t.push_row(["multi\nline"]);
    let text = render_text_table(&t);
    assert_eq!(
        text,
        "name        Δ µs\n\
         ----------  ----\n\
         ×2 ≤ limit     5\n\
         b           12.5\n\
         multi line\n"
    );
    assert_eq!(render_text_table(&Table::default()), "");
    let headless = Table {
        headers: vec![],
        rows: vec![vec!["a".into(), "1".into()]],
        align: vec![],
    };
    assert_eq!(render_text_table(&headless), "a  1\n");
}

#[test]
fn write_creates_exactly_the_reported_files() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path().join("out").join("drift");
    let report = sample();
    let paths = report.write(&dir, "run1").unwrap();
    let mut names: Vec<String> = paths
        .iter()
        .map(|p| {
            assert_eq!(p.parent(), Some(dir.as_path()));
            p.file_name().unwrap().to_string_lossy().into_owned()
        })
        .collect();
    assert_eq!(names[..2], ["run1.html", "run1.md"]);
    names.sort();
    assert_eq!(entries(&dir), names);
    assert_eq!(names.len(), 4);
    assert_eq!(fs::read_to_string(&paths[0]).unwrap(), report.to_html());
    // Every figure the Markdown links is there.
    let md = fs::read_to_string(&paths[1]).unwrap();
    for p in &paths[2..] {
        let name = p.file_name().unwrap().to_string_lossy();
        assert!(name.starts_with("run1-"));
        assert!(md.contains(&format!("]({name})")), "{name} not linked");
        check(&fs::read_to_string(p).unwrap(), &[]).unwrap();
    }
    // Writing again replaces the files and still leaves nothing else.
    assert_eq!(report.write(&dir, "run1").unwrap(), paths);
    assert_eq!(entries(&dir), names);
}

#[test]
fn write_refuses_a_stem_with_a_directory() {
    let tmp = tempfile::tempdir().unwrap();
    for stem in ["", ".", "..", "../x", "a/b", "a\\b"] {
        let e = sample().write(tmp.path(), stem).unwrap_err();
        assert_eq!(e.kind(), io::ErrorKind::InvalidInput, "{stem:?}");
    }
    assert!(entries(tmp.path()).is_empty());
}
