//! Field paths and the list of input problems they point to.

use std::fmt;

/// One step of a path into the input document.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Segment {
    /// An object member.
    Field(String),
    /// An array element.
    Index(usize),
    /// A line of a CSV document (1-based, the header is line 1); a following field
    /// is its column.
    Line(usize),
}

/// A path into the input document, shown as `slices[3].points[7].vol` and
/// convertible to a JSON pointer (RFC 6901) `/slices/3/points/7/vol`.
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub struct FieldPath(pub Vec<Segment>);

impl FieldPath {
    /// The document root.
    pub fn root() -> Self {
        Self(Vec::new())
    }

    /// This path extended by a member name.
    pub fn field(&self, name: &str) -> Self {
        let mut v = self.0.clone();
        v.push(Segment::Field(name.to_string()));
        Self(v)
    }

    /// This path extended by an array index.
    pub fn index(&self, i: usize) -> Self {
        let mut v = self.0.clone();
        v.push(Segment::Index(i));
        Self(v)
    }

    /// A cell (or, without a column, a line) of a CSV document.
    pub fn csv(line: usize, column: Option<&str>) -> Self {
        let mut v = vec![Segment::Line(line)];
        if let Some(c) = column {
            v.push(Segment::Field(c.to_string()));
        }
        Self(v)
    }

    /// This path below `prefix` (a document nested in a larger one).
    pub fn within(&self, prefix: &FieldPath) -> Self {
        Self(prefix.0.iter().chain(&self.0).cloned().collect())
    }

    /// Line and column when this path points into a CSV document.
    pub fn csv_location(&self) -> Option<(usize, Option<String>)> {
        match self.0.as_slice() {
            [Segment::Line(line)] => Some((*line, None)),
            [Segment::Line(line), Segment::Field(column), ..] => Some((*line, Some(column.clone()))),
            _ => None,
        }
    }

    /// The JSON pointer (RFC 6901) of this path (CSV lines appear as `/line/N`).
    pub fn json_pointer(&self) -> String {
        self.0
            .iter()
            .map(|s| match s {
                Segment::Field(f) => format!("/{}", f.replace('~', "~0").replace('/', "~1")),
                Segment::Index(i) => format!("/{i}"),
                Segment::Line(l) => format!("/line/{l}"),
            })
            .collect()
    }
}

impl fmt::Display for FieldPath {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        if self.0.is_empty() {
            return write!(f, "(document)");
        }
        for (n, s) in self.0.iter().enumerate() {
            match s {
                Segment::Field(name) if n == 0 => write!(f, "{name}")?,
                Segment::Field(name) if matches!(self.0[n - 1], Segment::Line(_)) => write!(f, ", column {name}")?,
                Segment::Line(line) => write!(f, "line {line}")?,
                Segment::Field(name) => write!(f, ".{name}")?,
                Segment::Index(i) => write!(f, "[{i}]")?,
            }
        }
        Ok(())
    }
}

/// One problem with the input, at a path.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Problem {
    /// Where.
    pub path: FieldPath,
    /// What is wrong, in words.
    pub message: String,
}

impl fmt::Display for Problem {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}: {}", self.path, self.message)
    }
}

/// Whether an input could not be read as a document at all, or was read and holds
/// invalid values (the service answers 400 and 422 respectively).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum InputErrorKind {
    /// Not well-formed: not JSON (or CSV) at all, or cut short.
    Malformed,
    /// Well-formed, but a field is missing, unknown, of the wrong type or out of range.
    #[default]
    Invalid,
}

/// Every problem found in an input, in document order; never empty.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{}", .problems.iter().map(|p| p.to_string()).collect::<Vec<_>>().join("\n"))]
pub struct InputErrors {
    /// Malformed or invalid.
    pub kind: InputErrorKind,
    /// The problems.
    pub problems: Vec<Problem>,
}

impl InputErrors {
    /// A single invalid value.
    pub fn one(path: FieldPath, message: impl Into<String>) -> Self {
        Self::from_problems(vec![Problem { path, message: message.into() }])
    }

    /// A document that cannot be read at all.
    pub fn malformed(path: FieldPath, message: impl Into<String>) -> Self {
        Self { kind: InputErrorKind::Malformed, problems: vec![Problem { path, message: message.into() }] }
    }

    /// Invalid values.
    pub fn from_problems(problems: Vec<Problem>) -> Self {
        Self { kind: InputErrorKind::Invalid, problems }
    }

    /// The same problems, with every path below `prefix`.
    pub fn within(self, prefix: &FieldPath) -> Self {
        Self {
            kind: self.kind,
            problems: self
                .problems
                .into_iter()
                .map(|p| Problem { path: p.path.within(prefix), message: p.message })
                .collect(),
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn paths_render_as_text_and_pointer() {
        let p = FieldPath::root().field("slices").index(3).field("points").index(7).field("vol");
        assert_eq!(p.to_string(), "slices[3].points[7].vol");
        assert_eq!(p.json_pointer(), "/slices/3/points/7/vol");
        assert_eq!(FieldPath::csv(7, Some("vol")).to_string(), "line 7, column vol");
        assert_eq!(FieldPath::csv(7, Some("vol")).csv_location(), Some((7, Some("vol".to_string()))));
        assert_eq!(FieldPath::csv(3, None).to_string(), "line 3");
    }
}
