//! Output for people, with nothing hone-specific in it: aligned text tables, reports that
//! render to text, Markdown and HTML ([`report`]), SVG line plots ([`plot`]), and files and
//! sets of files written all or nothing ([`fsutil`]).

pub mod fsutil;
pub mod plot;
pub mod report;
