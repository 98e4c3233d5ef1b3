//! Conversion between byte offsets and line/column positions.
//!
//! The terminal renderer works in byte offsets; the editor protocol counts UTF-16 code units.
//! Both conversions live here so no other crate re-derives them.

/// A zero-based line and column. The column unit depends on the method that produced it.
#[derive(Clone, Copy, Debug, PartialEq, Eq, PartialOrd, Ord)]
pub struct LineCol {
    pub line: u32,
    pub col: u32,
}

/// Start offsets of every line of one text.
#[derive(Clone, Debug)]
pub struct LineIndex {
    line_starts: Vec<usize>,
    len: usize,
}

impl LineIndex {
    pub fn new(text: &str) -> Self {
        let mut line_starts = vec![0];
        for (i, b) in text.bytes().enumerate() {
            if b == b'\n' {
                line_starts.push(i + 1);
            }
        }
        LineIndex { line_starts, len: text.len() }
    }

    pub fn line_count(&self) -> usize {
        self.line_starts.len()
    }

    /// The zero-based line holding `offset` (clamped to the text).
    pub fn line_of(&self, offset: usize) -> u32 {
        let offset = offset.min(self.len);
        (self.line_starts.partition_point(|&s| s <= offset) - 1) as u32
    }

    /// Byte offset where `line` starts (clamped to the end of the text).
    pub fn line_start(&self, line: u32) -> usize {
        self.line_starts.get(line as usize).copied().unwrap_or(self.len)
    }

    /// Line and column counted in bytes.
    pub fn byte_line_col(&self, offset: usize) -> LineCol {
        let offset = offset.min(self.len);
        let line = self.line_of(offset);
        LineCol { line, col: (offset - self.line_starts[line as usize]) as u32 }
    }

    /// Line and column counted in UTF-16 code units, as the editor protocol wants.
    /// An offset inside a multi-byte character is moved back to that character's start.
    pub fn utf16_line_col(&self, text: &str, offset: usize) -> LineCol {
        let mut offset = offset.min(text.len());
        while !text.is_char_boundary(offset) {
            offset -= 1;
        }
        let line = self.line_of(offset);
        let start = self.line_starts[line as usize];
        let col = text[start..offset].chars().map(char::len_utf16).sum::<usize>() as u32;
        LineCol { line, col }
    }

    /// Byte offset of a UTF-16 line/column; positions past the end of a line or of the text are
    /// clamped, and a column inside a surrogate pair is moved to the character's start.
    pub fn offset_of_utf16(&self, text: &str, pos: LineCol) -> usize {
        if pos.line as usize >= self.line_starts.len() {
            return text.len();
        }
        let start = self.line_starts[pos.line as usize];
        let end = self.line_starts.get(pos.line as usize + 1).map(|&s| s - 1).unwrap_or(text.len());
        let mut units = 0u32;
        for (i, ch) in text[start..end].char_indices() {
            let next = units + ch.len_utf16() as u32;
            if next > pos.col {
                return start + i;
            }
            units = next;
        }
        end
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn utf16_round_trip_with_multibyte_characters() {
        let text = "a\nθ = 1 // 𝑥\n";
        let index = LineIndex::new(text);
        let x = text.find('𝑥').unwrap();
        let pos = index.utf16_line_col(text, x);
        assert_eq!(pos, LineCol { line: 1, col: 9 });
        assert_eq!(index.offset_of_utf16(text, pos), x);
        // inside the surrogate pair: back to the character's start
        assert_eq!(index.offset_of_utf16(text, LineCol { line: 1, col: 10 }), x);
        // past the end of a line: clamped to the line end
        assert_eq!(index.offset_of_utf16(text, LineCol { line: 0, col: 99 }), 1);
        // past the last line
        assert_eq!(index.offset_of_utf16(text, LineCol { line: 9, col: 0 }), text.len());
    }
}
