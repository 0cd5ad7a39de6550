//! `eml.xml`: the dataset's metadata in Ecological Metadata Language (EML
//! 2.1.1, the version of GBIF's metadata profile): title, creator and contact,
//! publication date, abstract, licence, temporal and geographic coverage, and
//! how the export was made (the selection and the time).

use super::meta::xml_escape;

/// The licences portals of the trade accept for occurrence data.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Licence {
    /// Creative Commons Zero 1.0 (public domain dedication).
    Cc0,
    /// Creative Commons Attribution 4.0.
    CcBy,
    /// Creative Commons Attribution-NonCommercial 4.0.
    CcByNc,
}

impl Licence {
    /// The SPDX identifier.
    pub fn spdx(self) -> &'static str {
        match self {
            Licence::Cc0 => "CC0-1.0",
            Licence::CcBy => "CC-BY-4.0",
            Licence::CcByNc => "CC-BY-NC-4.0",
        }
    }

    fn url(self) -> &'static str {
        match self {
            Licence::Cc0 => "https://creativecommons.org/publicdomain/zero/1.0/legalcode",
            Licence::CcBy => "https://creativecommons.org/licenses/by/4.0/legalcode",
            Licence::CcByNc => "https://creativecommons.org/licenses/by-nc/4.0/legalcode",
        }
    }

    fn title(self) -> &'static str {
        match self {
            Licence::Cc0 => "Public Domain (CC0 1.0)",
            Licence::CcBy => "Creative Commons Attribution (CC-BY 4.0)",
            Licence::CcByNc => "Creative Commons Attribution Non Commercial (CC-BY-NC 4.0)",
        }
    }
}

/// A person or organisation to contact: a name and, optionally, an e-mail address.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Contact {
    /// Name.
    pub name: String,
    /// E-mail address.
    pub email: Option<String>,
}

impl Contact {
    /// Read `Name <address>` or a bare name.
    pub fn parse(text: &str) -> Contact {
        let text = text.trim();
        if let Some((name, rest)) = text.split_once('<')
            && let Some(email) = rest.strip_suffix('>')
        {
            return Contact {
                name: name.trim().to_string(),
                email: Some(email.trim().to_string()).filter(|e| !e.is_empty()),
            };
        }
        Contact {
            name: text.to_string(),
            email: None,
        }
    }

    fn xml(&self, element: &str) -> String {
        let email = self.email.as_ref().map_or(String::new(), |e| {
            format!(
                "\n      <electronicMailAddress>{}</electronicMailAddress>",
                xml_escape(e)
            )
        });
        format!(
            "    <{element}>\n      <organizationName>{}</organizationName>{email}\n    </{element}>\n",
            xml_escape(&self.name)
        )
    }
}

/// What goes into `eml.xml`.
#[derive(Debug, Clone)]
pub struct Dataset {
    /// Title.
    pub title: String,
    /// Abstract (one paragraph per line).
    pub description: String,
    /// Contact and creator.
    pub contact: Option<Contact>,
    /// Licence.
    pub licence: Option<Licence>,
    /// When the export was made (RFC 3339, UTC).
    pub exported_at: String,
    /// The selection in words and as flags.
    pub selection: String,
    /// First and last event date.
    pub dates: Option<(String, String)>,
    /// West, east, south, north bounds of the site coordinates.
    pub bounds: Option<[f64; 4]>,
    /// The protocols: description and effort unit.
    pub protocols: Vec<(String, String)>,
}

/// The `eml.xml` document.
pub fn write(d: &Dataset) -> String {
    let mut x = String::new();
    x.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n");
    x.push_str(&format!(
        "<eml:eml xmlns:eml=\"eml://ecoinformatics.org/eml-2.1.1\" \
         xmlns:xsi=\"http://www.w3.org/2001/XMLSchema-instance\" \
         xsi:schemaLocation=\"eml://ecoinformatics.org/eml-2.1.1 http://rs.gbif.org/schema/eml-gbif-profile/1.1/eml.xsd\" \
         packageId=\"tally-export-{}\" system=\"tally\" xml:lang=\"en\">\n",
        xml_escape(&d.exported_at)
    ));
    x.push_str("  <dataset>\n");
    x.push_str(&format!("    <title>{}</title>\n", xml_escape(&d.title)));
    if let Some(c) = &d.contact {
        x.push_str(&c.xml("creator"));
        x.push_str(&c.xml("metadataProvider"));
    }
    x.push_str(&format!(
        "    <pubDate>{}</pubDate>\n    <language>en</language>\n",
        d.exported_at.get(..10).unwrap_or(&d.exported_at)
    ));
    x.push_str("    <abstract>\n");
    for para in d.description.lines().filter(|l| !l.trim().is_empty()) {
        x.push_str(&format!("      <para>{}</para>\n", xml_escape(para.trim())));
    }
    x.push_str("    </abstract>\n");
    if let Some(l) = d.licence {
        x.push_str(&format!(
            "    <intellectualRights>\n      <para>This work is licensed under a <ulink url=\"{}\"><citetitle>{}</citetitle></ulink> License.</para>\n    </intellectualRights>\n",
            l.url(),
            l.title()
        ));
    }
    if d.bounds.is_some() || d.dates.is_some() {
        x.push_str("    <coverage>\n");
        if let Some([w, e, s, n]) = d.bounds {
            x.push_str(&format!(
                "      <geographicCoverage>\n        <geographicDescription>The sites of the export.</geographicDescription>\n        <boundingCoordinates>\n          <westBoundingCoordinate>{w}</westBoundingCoordinate>\n          <eastBoundingCoordinate>{e}</eastBoundingCoordinate>\n          <northBoundingCoordinate>{n}</northBoundingCoordinate>\n          <southBoundingCoordinate>{s}</southBoundingCoordinate>\n        </boundingCoordinates>\n      </geographicCoverage>\n"
            ));
        }
        if let Some((a, b)) = &d.dates {
            x.push_str(&format!(
                "      <temporalCoverage>\n        <rangeOfDates>\n          <beginDate><calendarDate>{}</calendarDate></beginDate>\n          <endDate><calendarDate>{}</calendarDate></endDate>\n        </rangeOfDates>\n      </temporalCoverage>\n",
                xml_escape(a),
                xml_escape(b)
            ));
        }
        x.push_str("    </coverage>\n");
    }
    if let Some(c) = &d.contact {
        x.push_str(&c.xml("contact"));
    }
    x.push_str("    <methods>\n");
    for (desc, unit) in &d.protocols {
        x.push_str(&format!(
            "      <methodStep>\n        <description>\n          <para>{} (effort in {}); every organism in a sample is identified and counted, so a taxon not listed for an event was counted as zero.</para>\n        </description>\n      </methodStep>\n",
            xml_escape(desc),
            xml_escape(unit)
        ));
    }
    if d.protocols.is_empty() {
        x.push_str("      <methodStep>\n        <description>\n          <para>Sampling events with their effort and the counts of every taxon found.</para>\n        </description>\n      </methodStep>\n");
    }
    x.push_str(&format!(
        "      <sampling>\n        <studyExtent>\n          <description>\n            <para>Exported by tally {} on {}: {}.</para>\n          </description>\n        </studyExtent>\n        <samplingDescription>\n          <para>One core row per sampling event (eventID), with its effort (sampleSizeValue, sampleSizeUnit); one occurrence row per taxon counted in it (organismQuantity, in individuals; individualCount too when the count is whole).</para>\n        </samplingDescription>\n      </sampling>\n",
        env!("CARGO_PKG_VERSION"),
        xml_escape(&d.exported_at),
        xml_escape(&d.selection)
    ));
    x.push_str("    </methods>\n  </dataset>\n");
    x.push_str(&format!(
        "  <additionalMetadata>\n    <metadata>\n      <gbif>\n        <dateStamp>{}</dateStamp>\n      </gbif>\n    </metadata>\n  </additionalMetadata>\n",
        xml_escape(&d.exported_at)
    ));
    x.push_str("</eml:eml>\n");
    x
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn contacts_are_read_with_or_without_an_address() {
        assert_eq!(
            Contact::parse("Wren Valley Trust <data@wren.example>"),
            Contact {
                name: "Wren Valley Trust".into(),
                email: Some("data@wren.example".into())
            }
        );
        assert_eq!(Contact::parse(" Ana ").email, None);
    }

    #[test]
    fn the_document_is_well_formed_and_escaped() {
        let d = Dataset {
            title: "Fish & <eels>".into(),
            description: "line one\n\nline two".into(),
            contact: Some(Contact::parse("A <a@b.example>")),
            licence: Some(Licence::CcBy),
            exported_at: "2026-12-03T10:00:00Z".into(),
            selection: "whole store".into(),
            dates: Some(("2010-04-01".into(), "2020-10-01".into())),
            bounds: Some([-3.5, -3.1, 52.0, 52.3]),
            protocols: vec![("kick sample".into(), "minutes".into())],
        };
        let text = write(&d);
        let doc = roxmltree::Document::parse(&text).unwrap();
        let title = doc.descendants().find(|n| n.has_tag_name("title")).unwrap();
        assert_eq!(title.text(), Some("Fish & <eels>"));
        assert_eq!(
            doc.descendants().filter(|n| n.has_tag_name("para")).count(),
            6
        );
        assert!(text.contains("<pubDate>2026-12-03</pubDate>"));
    }
}
