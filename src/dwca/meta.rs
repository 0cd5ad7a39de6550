//! `meta.xml`, the archive descriptor of the Darwin Core text guide: which
//! files hold the core and its extensions, how their text is delimited, and
//! which term each column holds.
//!
//! Defaults of omitted attributes are those of the guide's schema
//! (`tdwg_dwc_text.xsd`): fields terminated by `,`, lines by `\n`, fields
//! enclosed by `"`, no header lines, UTF-8. A `<field>` with a `default` and
//! no `index` gives every row that value; with both, the default fills empty
//! cells.

use super::{DWC, EVENT, OCCURRENCE};

/// One `<field>`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Field {
    /// The column (0-based), if the value is in the file.
    pub index: Option<usize>,
    /// The term URI.
    pub term: String,
    /// The value for rows where the column is empty or absent.
    pub default: Option<String>,
}

/// One `<core>` or `<extension>`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct FileSpec {
    /// `rowType`.
    pub row_type: String,
    /// The `<location>`s, in order (their rows are read one file after the other).
    pub locations: Vec<String>,
    /// `fieldsTerminatedBy`, unescaped.
    pub fields_terminated_by: String,
    /// `linesTerminatedBy`, unescaped.
    pub lines_terminated_by: String,
    /// `fieldsEnclosedBy`, unescaped ("" for none).
    pub fields_enclosed_by: String,
    /// `ignoreHeaderLines`.
    pub ignore_header_lines: usize,
    /// `encoding`.
    pub encoding: String,
    /// `<id index>` of the core or `<coreid index>` of an extension.
    pub id_index: Option<usize>,
    /// The `<field>`s.
    pub fields: Vec<Field>,
}

impl FileSpec {
    /// The first field of Darwin Core term `name`.
    pub fn field(&self, name: &str) -> Option<&Field> {
        self.fields
            .iter()
            .find(|f| super::dwc_term(&f.term) == Some(name))
    }
}

/// A parsed `meta.xml`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Meta {
    /// The core.
    pub core: FileSpec,
    /// The extensions, in order.
    pub extensions: Vec<FileSpec>,
    /// The `metadata` attribute (the metadata document's location), if any.
    pub metadata: Option<String>,
}

/// Undo the escapes the guide's examples use in delimiter attributes (`\t`,
/// `\n`, `\r`, `\\`); a real tab or line end stays as it is.
fn unescape(s: &str) -> String {
    let mut out = String::new();
    let mut chars = s.chars();
    while let Some(c) = chars.next() {
        if c == '\\' {
            match chars.next() {
                Some('t') => out.push('\t'),
                Some('n') => out.push('\n'),
                Some('r') => out.push('\r'),
                Some('\\') => out.push('\\'),
                Some(other) => {
                    out.push('\\');
                    out.push(other);
                }
                None => out.push('\\'),
            }
        } else {
            out.push(c);
        }
    }
    out
}

fn index_attr(node: roxmltree::Node<'_, '_>, what: &str) -> Result<Option<usize>, String> {
    match node.attribute("index") {
        None => Ok(None),
        Some(v) => {
            v.trim().parse::<usize>().map(Some).map_err(|_| {
                format!("<{what} index=\"{v}\">: the index must be a whole number ≥ 0")
            })
        }
    }
}

fn file_spec(node: roxmltree::Node<'_, '_>, core: bool) -> Result<FileSpec, String> {
    let name = node.tag_name().name();
    let attr = |a: &str, default: &str| unescape(node.attribute(a).unwrap_or(default));
    let ignore = match node.attribute("ignoreHeaderLines") {
        None => 0,
        Some(v) => v.trim().parse::<usize>().map_err(|_| {
            format!("<{name} ignoreHeaderLines=\"{v}\">: expected a whole number ≥ 0")
        })?,
    };
    let mut spec = FileSpec {
        row_type: node
            .attribute("rowType")
            .unwrap_or("http://rs.tdwg.org/dwc/xsd/simpledarwincore/SimpleDarwinRecord")
            .trim()
            .to_string(),
        locations: Vec::new(),
        fields_terminated_by: attr("fieldsTerminatedBy", ","),
        lines_terminated_by: attr("linesTerminatedBy", "\\n"),
        fields_enclosed_by: attr("fieldsEnclosedBy", "\""),
        ignore_header_lines: ignore,
        encoding: node
            .attribute("encoding")
            .unwrap_or("UTF-8")
            .trim()
            .to_string(),
        id_index: None,
        fields: Vec::new(),
    };
    for child in node.children().filter(roxmltree::Node::is_element) {
        match child.tag_name().name() {
            "files" => {
                for loc in child
                    .children()
                    .filter(|n| n.is_element() && n.tag_name().name() == "location")
                {
                    let text = loc.text().unwrap_or("").trim();
                    if !text.is_empty() {
                        spec.locations.push(text.to_string());
                    }
                }
            }
            "id" if core => spec.id_index = index_attr(child, "id")?,
            "coreid" if !core => spec.id_index = index_attr(child, "coreid")?,
            "field" => {
                let term = child
                    .attribute("term")
                    .ok_or_else(|| format!("a <field> of <{name}> has no term"))?;
                spec.fields.push(Field {
                    index: index_attr(child, "field")?,
                    term: term.trim().to_string(),
                    default: child.attribute("default").map(str::to_string),
                });
            }
            _ => {}
        }
    }
    if spec.locations.is_empty() {
        return Err(format!("<{name}> names no file (<files><location>)"));
    }
    Ok(spec)
}

/// Parse `meta.xml`.
///
/// # Errors
/// Text that is not XML, a root that is not `<archive>`, no `<core>`, a
/// `<core>` or `<extension>` without a file, a malformed index.
pub fn parse(text: &str) -> Result<Meta, String> {
    let doc = roxmltree::Document::parse(text).map_err(|e| format!("not well-formed XML: {e}"))?;
    let root = doc.root_element();
    if root.tag_name().name() != "archive" {
        return Err(format!(
            "the root element is <{}>, not <archive>",
            root.tag_name().name()
        ));
    }
    let mut core = None;
    let mut extensions = Vec::new();
    for child in root.children().filter(roxmltree::Node::is_element) {
        match child.tag_name().name() {
            "core" if core.is_none() => core = Some(file_spec(child, true)?),
            "core" => return Err("more than one <core>".into()),
            "extension" => extensions.push(file_spec(child, false)?),
            _ => {}
        }
    }
    let core = core.ok_or("no <core> element")?;
    Ok(Meta {
        core,
        extensions,
        metadata: root.attribute("metadata").map(str::to_string),
    })
}

/// Escape text for an XML attribute or element.
pub fn xml_escape(s: &str) -> String {
    let mut out = String::with_capacity(s.len());
    for c in s.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            c if (c as u32) < 0x20 && !matches!(c, '\t' | '\n' | '\r') => {
                // Not allowed in XML 1.0; shown as its code point.
                out.push_str(&format!("U+{:04X}", c as u32));
            }
            c => out.push(c),
        }
    }
    out
}

/// The `meta.xml` of the archives tally writes: tab-delimited UTF-8 files with
/// one header line, fields with a tab, a quote or a line end enclosed in `"`
/// (a quote inside doubled), the Event core `event.txt` and the
/// Occurrence extension `occurrence.txt`, every column by its term URI.
pub fn write(event_terms: &[&str], occurrence_terms: &[&str]) -> String {
    let fields = |terms: &[&str]| -> String {
        terms
            .iter()
            .enumerate()
            .map(|(i, t)| format!("    <field index=\"{i}\" term=\"{DWC}{t}\"/>\n"))
            .collect()
    };
    format!(
        "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n\
<archive xmlns=\"http://rs.tdwg.org/dwc/text/\" metadata=\"eml.xml\">\n\
  <core encoding=\"UTF-8\" fieldsTerminatedBy=\"\\t\" linesTerminatedBy=\"\\n\" fieldsEnclosedBy=\"&quot;\" ignoreHeaderLines=\"1\" rowType=\"{EVENT}\">\n\
    <files><location>event.txt</location></files>\n\
    <id index=\"0\"/>\n\
{}  </core>\n\
  <extension encoding=\"UTF-8\" fieldsTerminatedBy=\"\\t\" linesTerminatedBy=\"\\n\" fieldsEnclosedBy=\"&quot;\" ignoreHeaderLines=\"1\" rowType=\"{OCCURRENCE}\">\n\
    <files><location>occurrence.txt</location></files>\n\
    <coreid index=\"0\"/>\n\
{}  </extension>\n\
</archive>\n",
        fields(event_terms),
        fields(occurrence_terms),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults_follow_the_schema_and_escapes_are_read() {
        // Attribute defaults from tdwg_dwc_text.xsd (Darwin Core text guide schema).
        let m = parse(
            r#"<archive xmlns="http://rs.tdwg.org/dwc/text/">
                 <core rowType="http://rs.tdwg.org/dwc/terms/Event">
                   <files><location>e.csv</location></files><id index="0"/>
                   <field index="0" term="http://rs.tdwg.org/dwc/terms/eventID"/>
                   <field term="http://rs.tdwg.org/dwc/terms/sampleSizeUnit" default="minutes"/>
                 </core>
                 <extension fieldsTerminatedBy="\t" fieldsEnclosedBy="" ignoreHeaderLines="1"
                   rowType="http://rs.tdwg.org/dwc/terms/Occurrence">
                   <files><location>o.txt</location></files><coreid index="2"/>
                   <field index="0" term="https://rs.tdwg.org/dwc/terms/scientificName"/>
                 </extension>
               </archive>"#,
        )
        .unwrap();
        assert_eq!(m.core.fields_terminated_by, ",");
        assert_eq!(m.core.lines_terminated_by, "\n");
        assert_eq!(m.core.fields_enclosed_by, "\"");
        assert_eq!(m.core.ignore_header_lines, 0);
        assert_eq!(m.core.encoding, "UTF-8");
        assert_eq!(m.core.id_index, Some(0));
        assert_eq!(
            m.core.field("sampleSizeUnit").unwrap().default.as_deref(),
            Some("minutes")
        );
        assert_eq!(m.core.field("sampleSizeUnit").unwrap().index, None);
        let x = &m.extensions[0];
        assert_eq!(x.fields_terminated_by, "\t");
        assert_eq!(x.fields_enclosed_by, "");
        assert_eq!((x.ignore_header_lines, x.id_index), (1, Some(2)));
        assert!(x.field("scientificName").is_some());
    }

    #[test]
    fn what_tally_writes_reads_back() {
        let text = write(&super::super::EVENT_TERMS, &super::super::OCCURRENCE_TERMS);
        let m = parse(&text).unwrap();
        assert_eq!(m.core.row_type, EVENT);
        assert_eq!(m.extensions[0].row_type, OCCURRENCE);
        assert_eq!(m.core.fields.len(), super::super::EVENT_TERMS.len());
        assert_eq!(
            m.extensions[0].fields.len(),
            super::super::OCCURRENCE_TERMS.len()
        );
        assert_eq!(m.core.fields_terminated_by, "\t");
        assert_eq!(m.metadata.as_deref(), Some("eml.xml"));
    }

    #[test]
    fn broken_descriptors_are_named() {
        assert!(parse("<archive>").unwrap_err().contains("XML"));
        assert!(parse("<x/>").unwrap_err().contains("<archive>"));
        assert!(parse("<archive/>").unwrap_err().contains("<core>"));
        assert!(
            parse("<archive><core><files/></core></archive>")
                .unwrap_err()
                .contains("names no file")
        );
    }
}
