//! Report documents: one model, rendered as a self-contained HTML page, as Markdown with SVG
//! figures beside it, and tables as aligned plain text for terminals.
//!
//! A [`Report`] is a title, an optional subtitle and [`Section`]s of [`Block`]s: paragraphs,
//! tables, figures (SVG), code, key–value lists and pass/fail verdicts. The module knows
//! nothing of what is reported; callers build the blocks.
//!
//! - [`Report::to_html`] makes one file with inline CSS and inline SVG, no scripts and no
//!   external resources, readable on screen and printed in black and white.
//! - [`Report::to_markdown`] makes GitHub-flavoured Markdown that links its figures as
//!   separate SVG files and returns them to be written beside it.
//! - [`Report::write`] writes both, and the figures, as one set: all or nothing.
//! - [`render_text_table`] lays out a [`Table`] in columns for a terminal.
//!
//! All text is escaped for its target, so a label such as `a<b | c*` reads the same in every
//! format. Figures are numbered in document order, the same in HTML and Markdown.
//! Rendering is deterministic: no dates, no host names.

use std::fmt::Write as _;
use std::io;
use std::path::{Path, PathBuf};

use crate::fsutil::write_all_in;
use crate::plot::escape_xml;

/// A whole report.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Report {
    /// Title, the page's top heading.
    pub title: String,
    /// A line under the title (what was compared, from which inputs).
    pub subtitle: Option<String>,
    /// The sections, in order.
    pub sections: Vec<Section>,
}

/// A headed part of a [`Report`].
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Section {
    /// The section's heading.
    pub heading: String,
    /// Its content, in order.
    pub blocks: Vec<Block>,
}

/// One piece of content of a [`Section`].
#[derive(Debug, Clone, PartialEq)]
pub enum Block {
    /// Running text. A newline inside is kept as a line break.
    Paragraph(String),
    /// A table.
    Table(Table),
    /// A figure.
    Figure {
        /// A complete SVG document, as made by [`crate::plot`]. It is inserted into the HTML
        /// as it is (after dropping any XML declaration), so it must come from trusted code.
        svg: String,
        /// Caption; it is numbered ("Figure 2. …") when rendered.
        caption: String,
        /// Base name of the figure's own file, without `.svg`. Characters other than ASCII
        /// letters, digits, `-`, `_` and `.` become `-`; a name used twice gets `-2`, `-3`.
        file_stem: String,
    },
    /// Preformatted text (a command line, a configuration), shown in a monospace font.
    Code(String),
    /// The outcome of a check, shown prominently as PASS or FAIL with its explanation.
    Verdict {
        /// Whether the check passed.
        pass: bool,
        /// What was checked and why it passed or failed.
        text: String,
    },
    /// Name–value pairs (settings, totals), shown as a two-column list.
    KeyValues(Vec<(String, String)>),
}

/// Horizontal alignment of a table column.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Align {
    /// Text and names.
    #[default]
    Left,
    /// Numbers, so that digits line up.
    Right,
}

/// A table. Rows shorter than the widest row or the header are padded with empty cells;
/// a column without an [`Align`] is left-aligned.
#[derive(Debug, Clone, PartialEq, Default)]
pub struct Table {
    /// Column headings; may be empty for a table without a header.
    pub headers: Vec<String>,
    /// The rows, each a list of cells.
    pub rows: Vec<Vec<String>>,
    /// Alignment per column.
    pub align: Vec<Align>,
}

impl Table {
    /// A table with these headings and alignments and no rows yet.
    pub fn new<S: Into<String>>(headers: impl IntoIterator<Item = S>, align: Vec<Align>) -> Self {
        Table {
            headers: headers.into_iter().map(Into::into).collect(),
            rows: Vec::new(),
            align,
        }
    }

    /// Appends a row.
    pub fn push_row<S: Into<String>>(&mut self, cells: impl IntoIterator<Item = S>) {
        self.rows.push(cells.into_iter().map(Into::into).collect());
    }

    /// Number of columns: the longest of the header and the rows.
    pub fn columns(&self) -> usize {
        self.rows
            .iter()
            .map(Vec::len)
            .chain([self.headers.len()])
            .max()
            .unwrap_or(0)
    }

    fn align_of(&self, column: usize) -> Align {
        self.align.get(column).copied().unwrap_or_default()
    }

    /// The headers padded to `columns` cells, or `None` if there are none.
    fn header_cells(&self, columns: usize) -> Option<Vec<&str>> {
        (!self.headers.is_empty()).then(|| padded(&self.headers, columns))
    }
}

fn padded(cells: &[String], columns: usize) -> Vec<&str> {
    (0..columns)
        .map(|i| cells.get(i).map_or("", String::as_str))
        .collect()
}

/// Lays out `table` for a terminal: columns two spaces apart, a rule of `-` under the
/// header, numbers right-aligned where the table says so. The layout is `comfy-table`'s, with
/// no borders; widths are display widths, so labels such as `Δ loss` or `≤ 5 µs` line up.
/// Newlines and tabs in cells become spaces; lines carry no trailing blanks. A table without
/// columns gives an empty string.
pub fn render_text_table(table: &Table) -> String {
    layout(table, true, 0)
}

/// Lays out `table` like [`render_text_table`], but with the header as a plain first line (no
/// rule under it) and every line indented by `indent` spaces.
pub fn render_indented_table(table: &Table, indent: usize) -> String {
    layout(table, false, indent)
}

/// The layout of both text tables. The rule under the header is a row of its own, as wide as
/// each column's widest cell, so that it leaves the two spaces between columns blank.
fn layout(table: &Table, rule: bool, indent: usize) -> String {
    let columns = table.columns();
    if columns == 0 {
        return String::new();
    }
    let flat = |s: &str| s.replace(['\n', '\r', '\t'], " ");
    let header: Option<Vec<String>> = table
        .header_cells(columns)
        .map(|h| h.into_iter().map(flat).collect());
    let rows: Vec<Vec<String>> = table
        .rows
        .iter()
        .map(|r| padded(r, columns).into_iter().map(flat).collect())
        .collect();
    let mut grid = comfy_table::Table::new();
    grid.load_preset(comfy_table::presets::NOTHING);
    if let Some(h) = &header {
        grid.set_header(h.clone());
    }
    grid.add_rows(rows.iter().cloned());
    if rule && header.is_some() {
        let dashes: Vec<String> = grid
            .column_max_content_widths()
            .iter()
            .map(|&w| "-".repeat(usize::from(w).max(1)))
            .collect();
        let mut ruled = comfy_table::Table::new();
        ruled.load_preset(comfy_table::presets::NOTHING);
        ruled.set_header(header.clone().unwrap_or_default());
        ruled.add_row(dashes);
        ruled.add_rows(rows);
        grid = ruled;
    }
    for (i, column) in grid.column_iter_mut().enumerate() {
        let left = if i == 0 { indent } else { 2 };
        column.set_padding((u16::try_from(left).unwrap_or(u16::MAX), 0));
        column.set_cell_alignment(match table.align_of(i) {
            Align::Left => comfy_table::CellAlignment::Left,
            Align::Right => comfy_table::CellAlignment::Right,
        });
    }
    let mut out = String::new();
    for line in grid.lines() {
        out.push_str(line.trim_end());
        out.push('\n');
    }
    out
}

const CSS: &str = "\
body { font-family: system-ui, \"Segoe UI\", \"DejaVu Sans\", Helvetica, Arial, sans-serif; \
color: #1a1a1a; background: #ffffff; max-width: 60rem; margin: 2rem auto; padding: 0 1.25rem; \
line-height: 1.45; }
h1 { font-size: 1.6rem; margin: 0 0 0.3rem; }
.subtitle { color: #4a4a4a; margin: 0 0 1.5rem; }
h2 { font-size: 1.2rem; border-bottom: 1px solid #bbbbbb; padding-bottom: 0.2rem; margin-top: 2rem; }
p { white-space: pre-line; }
table { border-collapse: collapse; margin: 1rem 0; font-size: 0.92rem; }
th, td { border: 1px solid #b4b4b4; padding: 0.3rem 0.6rem; vertical-align: top; text-align: left; }
thead th { background: #eeeeee; }
tbody tr:nth-child(even) { background: #f8f8f8; }
th.r, td.r { text-align: right; font-variant-numeric: tabular-nums; }
table.kv th { background: #f4f4f4; font-weight: 600; }
.tcap, figcaption { font-size: 0.92rem; color: #333333; }
.tcap { margin: 1rem 0 -0.6rem; }
figure { margin: 1.25rem 0; }
figure svg { display: block; max-width: 100%; height: auto; }
figcaption { margin-top: 0.4rem; }
pre { background: #f5f5f5; border: 1px solid #d6d6d6; padding: 0.6rem 0.8rem; overflow-x: auto; \
font-size: 0.88rem; }
pre, code { font-family: ui-monospace, Menlo, Consolas, \"DejaVu Sans Mono\", monospace; }
.verdict { padding: 0.7rem 1rem; margin: 1rem 0; white-space: pre-line; }
.verdict .mark { font-weight: 700; letter-spacing: 0.05em; margin-right: 0.6rem; }
.verdict.pass { border: 3px solid #1e7b34; background: #eaf6ec; }
.verdict.pass .mark { color: #1e7b34; }
.verdict.fail { border: 6px double #b3261e; background: #fbeaea; }
.verdict.fail .mark { color: #b3261e; }
@page { margin: 15mm; }
@media print {
  body { margin: 0; max-width: none; font-size: 10.5pt; }
  h2 { break-after: avoid; }
  table, figure, pre, .verdict { break-inside: avoid; }
  thead th, tbody tr, .verdict { print-color-adjust: exact; -webkit-print-color-adjust: exact; }
}
";

impl Report {
    /// A report with a title and nothing else.
    pub fn new(title: impl Into<String>) -> Self {
        Report {
            title: title.into(),
            subtitle: None,
            sections: Vec::new(),
        }
    }

    /// The report as one self-contained HTML page (see the [module docs](self)).
    pub fn to_html(&self) -> String {
        let mut out = String::new();
        let _ = write!(
            out,
            "<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n\
             <meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n\
             <title>{}</title>\n<style>\n{CSS}</style>\n</head>\n<body>\n<header>\n<h1>{}</h1>\n",
            escape_xml(&self.title),
            escape_xml(&self.title)
        );
        if let Some(sub) = &self.subtitle {
            let _ = writeln!(out, "<p class=\"subtitle\">{}</p>", escape_xml(sub));
        }
        out.push_str("</header>\n");
        let mut figures = 0;
        for section in &self.sections {
            let _ = writeln!(out, "<section>\n<h2>{}</h2>", escape_xml(&section.heading));
            for block in &section.blocks {
                html_block(&mut out, block, &mut figures);
            }
            out.push_str("</section>\n");
        }
        out.push_str("</body>\n</html>\n");
        out
    }

    /// The report as GitHub-flavoured Markdown, and its figures.
    ///
    /// Figures are linked as `![caption](figure_dir_name/stem.svg)`; the second value lists
    /// each figure's file name (`stem.svg`, without the directory) and SVG text, to be written
    /// into `figure_dir_name` next to the Markdown file. An empty `figure_dir_name` links the
    /// files as siblings of the Markdown file.
    pub fn to_markdown(&self, figure_dir_name: &str) -> (String, Vec<(String, String)>) {
        let dir = figure_dir_name.trim_end_matches('/');
        let prefix = if dir.is_empty() {
            String::new()
        } else {
            format!("{dir}/")
        };
        self.markdown(&prefix, "")
    }

    /// The files of the report named by `stem`, rendered and not yet written: `stem.html`,
    /// `stem.md`, then the figures in document order as `stem-<figure stem>.svg` (beside the
    /// Markdown file, so reports of different stems can share a directory).
    ///
    /// # Errors
    /// [`io::ErrorKind::InvalidInput`] if `stem` is empty or not a plain file name (it holds a
    /// path separator, or is `.` or `..`).
    pub fn files(&self, stem: &str) -> io::Result<Vec<(String, Vec<u8>)>> {
        let plain = !stem.is_empty()
            && stem != "."
            && stem != ".."
            && !stem.contains(['/', '\\', '\0'])
            && Path::new(stem).file_name() == Some(std::ffi::OsStr::new(stem));
        if !plain {
            return Err(io::Error::new(
                io::ErrorKind::InvalidInput,
                format!("report name `{stem}` must be a plain file name without a directory"),
            ));
        }
        let (markdown, figures) = self.markdown("", &format!("{stem}-"));
        let mut files = vec![
            (format!("{stem}.html"), self.to_html().into_bytes()),
            (format!("{stem}.md"), markdown.into_bytes()),
        ];
        files.extend(
            figures
                .into_iter()
                .map(|(name, svg)| (name, svg.into_bytes())),
        );
        Ok(files)
    }

    /// Writes [`Report::files`] into `dir`, creating `dir` if needed, all or nothing (see
    /// [`write_all_in`]): a failure leaves no file of the report and no directory it created.
    /// Returns the paths written: the HTML file, the Markdown file, then the figures in
    /// document order.
    ///
    /// # Errors
    /// As [`Report::files`]; otherwise the I/O error of creating `dir` or of writing a file,
    /// with the path it concerns in its message.
    pub fn write(&self, dir: &Path, stem: &str) -> io::Result<Vec<PathBuf>> {
        let files = self.files(stem)?;
        write_all_in(dir, &files).map_err(|e| io::Error::new(e.source.kind(), e.to_string()))
    }

    /// Markdown with figure links `link_prefix + name_prefix + stem.svg` and figure files
    /// named `name_prefix + stem.svg`.
    fn markdown(&self, link_prefix: &str, name_prefix: &str) -> (String, Vec<(String, String)>) {
        let mut out = String::new();
        let _ = writeln!(out, "# {}\n", md_line(&self.title));
        if let Some(sub) = &self.subtitle {
            let _ = writeln!(out, "{}\n", md_paragraph(sub));
        }
        let mut files: Vec<(String, String)> = Vec::new();
        for section in &self.sections {
            let _ = writeln!(out, "## {}\n", md_line(&section.heading));
            for block in &section.blocks {
                match block {
                    Block::Paragraph(text) => {
                        let _ = writeln!(out, "{}\n", md_paragraph(text));
                    }
                    Block::Table(table) => {
                        if table.columns() > 0 {
                            out.push_str(&md_table(table));
                            out.push('\n');
                        }
                    }
                    Block::Figure {
                        svg,
                        caption,
                        file_stem,
                    } => {
                        let name = unique_name(&files, name_prefix, file_stem);
                        let number = files.len() + 1;
                        let _ = writeln!(
                            out,
                            "![{}]({})\n\n*Figure {number}.* {}\n",
                            md_line(caption),
                            md_url(&format!("{link_prefix}{name}")),
                            md_line(caption)
                        );
                        files.push((name, strip_prolog(svg).to_string()));
                    }
                    Block::Code(code) => {
                        out.push_str(&md_code(code));
                        out.push('\n');
                    }
                    Block::Verdict { pass, text } => {
                        let mark = if *pass { "PASS ✓" } else { "FAIL ✗" };
                        let body = md_paragraph(text);
                        for (i, line) in body.lines().enumerate() {
                            if i == 0 {
                                let _ = writeln!(out, "> **{mark}** {line}");
                            } else {
                                let _ = writeln!(out, "> {line}");
                            }
                        }
                        if body.is_empty() {
                            let _ = writeln!(out, "> **{mark}**");
                        }
                        out.push('\n');
                    }
                    Block::KeyValues(pairs) => {
                        for (k, v) in pairs {
                            let _ = writeln!(out, "- **{}:** {}", md_line(k), md_line(v));
                        }
                        out.push('\n');
                    }
                }
            }
        }
        while out.ends_with("\n\n") {
            out.pop();
        }
        (out, files)
    }
}

fn html_block(out: &mut String, block: &Block, figures: &mut usize) {
    match block {
        Block::Paragraph(text) => {
            let _ = writeln!(out, "<p>{}</p>", escape_xml(text.trim_end()));
        }
        Block::Table(table) => {
            if table.columns() > 0 {
                html_table(out, table);
            }
        }
        Block::Figure { svg, caption, .. } => {
            *figures += 1;
            let _ = writeln!(
                out,
                "<figure>\n{}\n<figcaption><strong>Figure {}.</strong> {}</figcaption>\n</figure>",
                strip_prolog(svg).trim_end(),
                figures,
                escape_xml(caption)
            );
        }
        Block::Code(code) => {
            let _ = writeln!(
                out,
                "<pre><code>{}</code></pre>",
                escape_xml(code.trim_end())
            );
        }
        Block::Verdict { pass, text } => {
            let (class, mark) = if *pass {
                ("pass", "PASS ✓")
            } else {
                ("fail", "FAIL ✗")
            };
            let _ = writeln!(
                out,
                "<div class=\"verdict {class}\" role=\"status\"><span class=\"mark\">{mark}</span>{}</div>",
                escape_xml(text.trim_end())
            );
        }
        Block::KeyValues(pairs) => {
            out.push_str("<table class=\"kv\">\n<tbody>\n");
            for (k, v) in pairs {
                let _ = writeln!(
                    out,
                    "<tr><th scope=\"row\">{}</th><td>{}</td></tr>",
                    escape_xml(k),
                    escape_xml(v)
                );
            }
            out.push_str("</tbody>\n</table>\n");
        }
    }
}

fn html_table(out: &mut String, table: &Table) {
    let columns = table.columns();
    let class = |i: usize| match table.align_of(i) {
        Align::Left => "",
        Align::Right => " class=\"r\"",
    };
    out.push_str("<table>\n");
    if let Some(header) = table.header_cells(columns) {
        out.push_str("<thead>\n<tr>");
        for (i, h) in header.iter().enumerate() {
            let _ = write!(out, "<th scope=\"col\"{}>{}</th>", class(i), escape_xml(h));
        }
        out.push_str("</tr>\n</thead>\n");
    }
    out.push_str("<tbody>\n");
    for row in &table.rows {
        out.push_str("<tr>");
        for (i, cell) in padded(row, columns).iter().enumerate() {
            let _ = write!(out, "<td{}>{}</td>", class(i), escape_xml(cell));
        }
        out.push_str("</tr>\n");
    }
    out.push_str("</tbody>\n</table>\n");
}

/// `svg` without a leading XML declaration or document type, which may not appear inside
/// HTML.
fn strip_prolog(svg: &str) -> &str {
    let mut s = svg.trim_start();
    while s.starts_with("<?") || s.starts_with("<!DOCTYPE") || s.starts_with("<!doctype") {
        match s.find('>') {
            Some(end) => s = s[end + 1..].trim_start(),
            None => break,
        }
    }
    s
}

/// Figure file name `prefix + sanitized stem + .svg`, numbered if already taken.
fn unique_name(taken: &[(String, String)], prefix: &str, stem: &str) -> String {
    let mut clean: String = stem
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.') {
                c
            } else {
                '-'
            }
        })
        .collect();
    // No hidden files, no `..`.
    let dots = clean.len() - clean.trim_start_matches('.').len();
    clean.replace_range(..dots, &"-".repeat(dots));
    let clean = clean.trim_end_matches('.');
    let clean = if clean.is_empty() { "figure" } else { clean };
    let mut name = format!("{prefix}{clean}.svg");
    let mut n = 2;
    while taken.iter().any(|(t, _)| t.eq_ignore_ascii_case(&name)) {
        name = format!("{prefix}{clean}-{n}.svg");
        n += 1;
    }
    name
}

/// Escapes inline Markdown: punctuation that could start emphasis, code, links, HTML,
/// entities or strike-through gets a backslash; `|` too, so the text is safe in a table cell.
/// Line breaks become spaces.
fn md_line(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.trim().chars() {
        match c {
            '\\' | '`' | '*' | '_' | '[' | ']' | '<' | '>' | '|' | '&' | '~' => {
                out.push('\\');
                out.push(c);
            }
            '\n' | '\r' | '\t' => out.push(' '),
            c => out.push(c),
        }
    }
    out
}

/// Escapes a paragraph: each line as [`md_line`], plus what would turn a line into a heading,
/// list item or rule; line breaks are kept as hard breaks.
fn md_paragraph(text: &str) -> String {
    let lines: Vec<String> = text
        .trim()
        .lines()
        .map(|line| {
            let mut l = md_line(line);
            if l.starts_with(['#', '-', '+', '=']) {
                l.insert(0, '\\');
            } else {
                let digits = l.chars().take_while(char::is_ascii_digit).count();
                if digits > 0 && l[digits..].starts_with(['.', ')']) {
                    l.insert(digits, '\\');
                }
            }
            l
        })
        .collect();
    let mut out = String::new();
    for (i, line) in lines.iter().enumerate() {
        out.push_str(line);
        if let Some(next) = lines.get(i + 1) {
            // A backslash at the end of a line is a hard break; a blank line parts paragraphs.
            if !line.is_empty() && !next.is_empty() {
                out.push('\\');
            }
            out.push('\n');
        }
    }
    out
}

/// A link target with the characters that would end or break it percent-encoded.
fn md_url(url: &str) -> String {
    let mut out = String::with_capacity(url.len());
    for c in url.chars() {
        match c {
            ' ' => out.push_str("%20"),
            '(' => out.push_str("%28"),
            ')' => out.push_str("%29"),
            '<' => out.push_str("%3C"),
            '>' => out.push_str("%3E"),
            c => out.push(c),
        }
    }
    out
}

fn md_table(table: &Table) -> String {
    let columns = table.columns();
    let header = table
        .header_cells(columns)
        .unwrap_or_else(|| vec![""; columns]);
    let mut out = String::new();
    let row = |out: &mut String, cells: &[&str]| {
        out.push('|');
        for cell in cells {
            let _ = write!(out, " {} |", md_line(cell));
        }
        out.push('\n');
    };
    row(&mut out, &header);
    out.push('|');
    for i in 0..columns {
        out.push_str(match table.align_of(i) {
            Align::Left => " :--- |",
            Align::Right => " ---: |",
        });
    }
    out.push('\n');
    for r in &table.rows {
        row(&mut out, &padded(r, columns));
    }
    out
}

/// A fenced code block whose fence is longer than any run of backticks inside.
fn md_code(code: &str) -> String {
    let mut longest = 0;
    let mut run = 0;
    for c in code.chars() {
        run = if c == '`' { run + 1 } else { 0 };
        longest = longest.max(run);
    }
    let fence = "`".repeat((longest + 1).max(3));
    format!("{fence}text\n{}\n{fence}\n", code.trim_end())
}

/// A decimal for people: six significant digits, trailing zeros dropped (a fixed-point
/// learning rate of 0.050000011920928955 shows as 0.05).
pub fn short_decimal(v: f64) -> String {
    if v == 0.0 || !v.is_finite() {
        return format!("{v}");
    }
    let decimals = (5 - v.abs().log10().floor() as i32).clamp(0, 17) as usize;
    let s = format!("{v:.decimals$}");
    if s.contains('.') {
        s.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        s
    }
}

#[cfg(test)]
mod tests;
