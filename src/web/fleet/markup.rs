//! Pieces every fleet page uses: the tabs, links to a unit and a cell, a table that scrolls
//! inside its card, a figure.

use crate::fleet::centred::CellKey;
use crate::web::escape;

/// The pages the tabs lead to.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Tab {
    /// The units list.
    Units,
    /// The cells' statistics.
    Cells,
    /// The stations' offsets.
    Stations,
    /// A page under none of them (a unit, a cell).
    None,
}

/// The row of tabs, `current` marked.
pub fn tabs(current: Tab) -> String {
    let mut s = String::from("<nav class=\"fleet-tabs\" aria-label=\"fleet pages\">");
    for (tab, href, name) in [
        (Tab::Units, "/", "Units"),
        (Tab::Cells, "/cells", "Cells"),
        (Tab::Stations, "/stations", "Stations"),
    ] {
        let mark = if tab == current {
            " aria-current=\"page\""
        } else {
            ""
        };
        s += &format!("<a href=\"{href}\"{mark}>{name}</a>");
    }
    s + "</nav>"
}

/// `text` as one URL path segment: unreserved characters kept, the rest percent-encoded.
pub fn path_segment(text: &str) -> String {
    let mut out = String::new();
    for b in text.bytes() {
        if b.is_ascii_alphanumeric() || b"-._~".contains(&b) {
            out.push(b as char);
        } else {
            out += &format!("%{b:02X}");
        }
    }
    out
}

/// A link to unit `serial`'s page.
pub fn unit_link(serial: &str) -> String {
    format!(
        "<a href=\"/unit/{}\">{}</a>",
        path_segment(serial),
        escape(serial)
    )
}

/// The path of a cell's page.
pub fn cell_href(cell: CellKey) -> String {
    format!("/cell/{}/{}/{}", cell.0, cell.1, cell.2)
}

/// A cell as `center/bw/gain`, linked to its page.
pub fn cell_link(cell: CellKey) -> String {
    format!(
        "<a href=\"{}\">{}/{}/{}</a>",
        cell_href(cell),
        cell.0,
        cell.1,
        cell.2
    )
}

/// A table with id `id`: `header` as text, each row's cells already HTML; the columns in
/// `text_cols` aligned left (words), the rest right (numbers). It scrolls inside its card.
pub fn table(id: &str, header: &[&str], text_cols: &[usize], rows: &[Vec<String>]) -> String {
    let align = |i: usize| {
        if text_cols.contains(&i) {
            " class=\"text\""
        } else {
            ""
        }
    };
    let mut s = format!("<div class=\"scroll\"><table id=\"{id}\"><thead><tr>");
    for (i, h) in header.iter().enumerate() {
        s += &format!("<th{}>{}</th>", align(i), escape(h));
    }
    s += "</tr></thead><tbody>";
    for r in rows {
        s += "<tr>";
        for (i, c) in r.iter().enumerate() {
            s += &format!("<td{}>{c}</td>", align(i));
        }
        s += "</tr>";
    }
    s + "</tbody></table></div>"
}

/// Plain text cells, escaped.
pub fn escaped(row: &[String]) -> Vec<String> {
    row.iter().map(|c| escape(c)).collect()
}

/// A plot in a figure that scrolls on a narrow screen, with its caption.
pub fn figure(svg: &str, caption: &str) -> String {
    format!(
        "<figure><div class=\"plotbox\">{svg}</div><figcaption>{}</figcaption></figure>",
        escape(caption)
    )
}

/// A yes/no as a coloured pill.
pub fn pill(yes: bool, yes_text: &str, no_text: &str) -> String {
    if yes {
        format!("<span class=\"pill yes\">{}</span>", escape(yes_text))
    } else {
        format!("<span class=\"pill no\">{}</span>", escape(no_text))
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_serial_is_one_safe_path_segment() {
        assert_eq!(path_segment("DW-T3/F5 #1"), "DW-T3%2FF5%20%231");
        assert!(unit_link("<x>").contains("&lt;x&gt;"));
    }
}
