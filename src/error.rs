//! Errors about the user's input files, located down to the line and column.

use std::fmt;
use std::path::{Path, PathBuf};

/// A problem with an input file: where it is and what to do about it.
///
/// Displays as `FILE:LINE: column 'NAME': WHAT. HINT`, the form editors and
/// terminals turn into a link.
#[derive(Debug, Clone, PartialEq)]
pub struct InputError {
    /// The file at fault.
    pub file: PathBuf,
    /// 1-based line number, when the problem sits on one line.
    pub line: Option<u64>,
    /// Column name, when the problem sits in one column.
    pub column: Option<String>,
    /// What is wrong.
    pub message: String,
    /// What the user can do about it.
    pub hint: Option<String>,
}

impl InputError {
    /// A problem with the file as a whole.
    pub fn file(file: &Path, message: impl Into<String>) -> Self {
        InputError {
            file: file.to_path_buf(),
            line: None,
            column: None,
            message: message.into(),
            hint: None,
        }
    }

    /// A problem on one line.
    pub fn at(file: &Path, line: u64, message: impl Into<String>) -> Self {
        InputError {
            line: Some(line),
            ..InputError::file(file, message)
        }
    }

    /// Names the column at fault.
    pub fn column(mut self, column: impl Into<String>) -> Self {
        self.column = Some(column.into());
        self
    }

    /// Adds what the user can do about it.
    pub fn hint(mut self, hint: impl Into<String>) -> Self {
        self.hint = Some(hint.into());
        self
    }
}

impl fmt::Display for InputError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}", self.file.display())?;
        if let Some(line) = self.line {
            write!(f, ":{line}")?;
        }
        write!(f, ": ")?;
        if let Some(col) = &self.column {
            write!(f, "column '{col}': ")?;
        }
        write!(f, "{}", self.message)?;
        if let Some(hint) = &self.hint {
            let mut c = hint.chars();
            if let Some(first) = c.next() {
                write!(f, ". {}{}", first.to_uppercase(), c.as_str())?;
            }
        }
        Ok(())
    }
}

impl std::error::Error for InputError {}

/// Several input problems at once, so that one run shows the user all of them.
#[derive(Debug, Clone, PartialEq)]
pub struct InputErrors(pub Vec<InputError>);

impl fmt::Display for InputErrors {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        const SHOWN: usize = 20;
        for (k, e) in self.0.iter().take(SHOWN).enumerate() {
            if k > 0 {
                writeln!(f)?;
            }
            write!(f, "{e}")?;
        }
        if self.0.len() > SHOWN {
            write!(f, "\n... and {} more problems", self.0.len() - SHOWN)?;
        }
        Ok(())
    }
}

impl std::error::Error for InputErrors {}

impl From<InputError> for InputErrors {
    fn from(e: InputError) -> Self {
        InputErrors(vec![e])
    }
}

/// Reads a text file, refusing binary content with a clear message.
pub fn read_text(path: &Path, what: &str) -> Result<String, InputError> {
    let bytes = std::fs::read(path).map_err(|e| {
        InputError::file(path, format!("cannot read the {what} file: {e}"))
            .hint("check the path and the file's permissions")
    })?;
    if bytes.contains(&0) {
        return Err(InputError::file(
            path,
            format!("this is a binary file, not a {what} CSV text"),
        )
        .hint("give the comma-separated text export"));
    }
    String::from_utf8(bytes).map_err(|e| {
        let upto = &e.as_bytes()[..e.utf8_error().valid_up_to()];
        let line = upto.iter().filter(|&&b| b == b'\n').count() as u64 + 1;
        InputError::at(path, line, "the text is not valid UTF-8")
            .hint("save the file as UTF-8 (or plain ASCII) text")
    })
}
