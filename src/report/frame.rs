//! What every SVG picture ogive writes shares: the document's opening (its size, font, title,
//! description and white ground), the centred lines of heading above the panels, the legend's
//! entries, the end of the document, and writing a set of pictures into a folder. The plots of
//! `ogive describe` ([`super::svg`]) and of `ogive evaluate` (`crate::evaluate::plots`) draw
//! their panels inside it; it knows nothing of what they show.
//!
//! Text arguments named `markup` are SVG character data already escaped by the caller (with
//! [`escape`] around whatever came from a model or a user); the others are escaped here.

use std::fmt::Write as _;
use std::path::{Path, PathBuf};

use super::svg::{escape, PlotError};

/// The height of every picture, in pixels.
pub(crate) const HEIGHT: f64 = 660.0;
/// The left edge of every panel: room for the tick labels and the rotated axis label.
pub(crate) const LEFT: f64 = 90.0;
/// The top edge of the first panel, below the lines of heading.
pub(crate) const TOP: f64 = 80.0;

/// A picture's width; its height is [`HEIGHT`].
pub(crate) struct Frame {
    pub(crate) width: f64,
}

impl Frame {
    /// The document's opening: the `<svg>` element, its title and description (markup), and a
    /// white ground under everything.
    pub(crate) fn open(&self, svg: &mut String, title: &str, description_markup: &str) {
        let width = self.width;
        let _ = writeln!(
            svg,
            r##"<svg xmlns="http://www.w3.org/2000/svg" width="{width}" height="{HEIGHT}" viewBox="0 0 {width} {HEIGHT}" font-family="Helvetica, Arial, sans-serif" font-size="12" fill="#222">"##
        );
        let _ = writeln!(svg, "<title>{}</title>", escape(title));
        let _ = writeln!(svg, "<desc>{description_markup}</desc>");
        let _ = writeln!(
            svg,
            r#"<rect width="{width}" height="{HEIGHT}" fill="white"/>"#
        );
    }

    /// The picture's title in bold, centred, its baseline at `y`.
    pub(crate) fn heading(&self, svg: &mut String, y: f64, title: &str) {
        let _ = writeln!(
            svg,
            r#"<text x="{}" y="{y}" text-anchor="middle" font-size="17" font-weight="bold">{}</text>"#,
            self.width / 2.0,
            escape(title)
        );
    }

    /// A grey line under the title, centred, its baseline at `y`; `class`, when given, tags it
    /// for a reader of the file.
    pub(crate) fn subheading(&self, svg: &mut String, y: f64, class: Option<&str>, markup: &str) {
        let class = class
            .map(|c| format!(r#"class="{c}" "#))
            .unwrap_or_default();
        let _ = writeln!(
            svg,
            r##"<text {class}x="{}" y="{y}" text-anchor="middle" fill="#555">{markup}</text>"##,
            self.width / 2.0
        );
    }
}

/// One legend entry at (`x`, `y`): a swatch 18 px wide (markup, drawn around the origin) and
/// its label to the right of it.
pub(crate) fn legend_entry(svg: &mut String, x: f64, y: f64, swatch_markup: &str, label: &str) {
    let _ = writeln!(
        svg,
        r#"<g class="legend" transform="translate({x} {y})">{swatch_markup}<text x="24" y="4">{}</text></g>"#,
        escape(label)
    );
}

/// A path's `d` attribute through points already in pixels: a move to the first, a line to
/// each of the others, to a thousandth of a pixel.
pub(crate) fn path_data(pixels: impl Iterator<Item = (f64, f64)>) -> String {
    let mut d = String::new();
    for (i, (x, y)) in pixels.enumerate() {
        let _ = write!(d, "{}{x:.3},{y:.3}", if i == 0 { "M" } else { " L" });
    }
    d
}

/// The end of the document.
pub(crate) fn close(svg: &mut String) {
    let _ = writeln!(svg, "</svg>");
}

/// Write each (file name, picture) into `folder` (created if needed); returns the paths written.
pub(crate) fn write_all(
    folder: &Path,
    pictures: impl IntoIterator<Item = Result<(String, String), PlotError>>,
) -> Result<Vec<PathBuf>, PlotError> {
    std::fs::create_dir_all(folder).map_err(|source| PlotError::Write {
        path: folder.to_path_buf(),
        source,
    })?;
    let mut written = Vec::new();
    for picture in pictures {
        let (name, svg) = picture?;
        let path = folder.join(name);
        std::fs::write(&path, svg).map_err(|source| PlotError::Write {
            path: path.clone(),
            source,
        })?;
        written.push(path);
    }
    Ok(written)
}
