//! Table, CSV and JSON of `tally distances`: the square dissimilarity matrix
//! between the rows of a prepared selection.

use std::io::{self, Write};

use serde_json::{Value, json};

use super::Render;
use crate::analysis::dissimilarity::DistanceMatrix;
use crate::report::format::{csv_num, new_table, num, write_table};
use crate::workflow::Prepared;
use crate::workflow::design::DistanceSpec;

/// The dissimilarities `matrix` computed under `spec` between the rows of `prepared`.
#[derive(Debug, Clone, Copy)]
pub struct Distances<'a> {
    /// The selection and its count matrix.
    pub prepared: &'a Prepared,
    /// Dissimilarity and transform.
    pub spec: DistanceSpec,
    /// The dissimilarities between the rows of `prepared.matrix`.
    pub matrix: &'a DistanceMatrix,
}

/// A dissimilarity for people: six decimals, trailing zeros kept for alignment.
fn fmt_d(v: f64) -> String {
    if v.is_finite() {
        format!("{v:.6}")
    } else {
        String::new()
    }
}

impl Distances<'_> {
    fn labels(&self) -> Vec<&str> {
        self.prepared
            .matrix
            .samples
            .iter()
            .map(|s| s.label.as_str())
            .collect()
    }

    /// `unit`, `selection`, `n`, `samples`, `distance`, `transform`, `matrix`
    /// (rows of the square matrix, `null` where undefined), `fingerprint`, `notes`.
    pub fn json(&self) -> Value {
        let p = self.prepared;
        let labels = self.labels();
        json!({
            "unit": p.unit().as_str(),
            "selection": p.selection,
            "n": labels.len(),
            "samples": labels,
            "distance": self.spec.distance.name(),
            "transform": self.spec.transform.name(),
            "matrix": self.matrix
                .to_square()
                .iter()
                .map(|r| r.iter().map(|&x| num(x)).collect::<Vec<_>>())
                .collect::<Vec<_>>(),
            "fingerprint": p.fingerprint(),
            "notes": p.matrix.notes,
        })
    }
}

impl Render for Distances<'_> {
    fn table(&self, out: &mut dyn Write) -> io::Result<()> {
        let labels = self.labels();
        writeln!(
            out,
            "{} dissimilarities after transform '{}', {} {} rows",
            self.spec.distance.name(),
            self.spec.transform.name(),
            labels.len(),
            self.prepared.unit().as_str()
        )?;
        let mut header = vec!["sample"];
        header.extend(labels.iter().copied());
        let mut t = new_table(&header);
        for (l, r) in labels.iter().zip(self.matrix.to_square()) {
            let mut row = vec![l.to_string()];
            row.extend(r.iter().map(|&x| fmt_d(x)));
            t.add_row(row);
        }
        write_table(out, &t)
    }

    /// A square CSV: first column `sample`, then one column per row; empty where undefined.
    fn csv(&self, out: &mut dyn Write) -> io::Result<()> {
        let labels = self.labels();
        let mut w = crate::report::format::csv_writer(out);
        let mut header = vec!["sample".to_string()];
        header.extend(labels.iter().map(|l| l.to_string()));
        w.write_record(&header)?;
        for (l, r) in labels.iter().zip(self.matrix.to_square()) {
            let mut rec = vec![l.to_string()];
            rec.extend(r.iter().map(|&x| csv_num(x)));
            w.write_record(&rec)?;
        }
        w.flush()
    }
}
