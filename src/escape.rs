//! Text from a file, made safe to print on a terminal.
//!
//! An index file names things (the metric program's command, the source file, items, a
//! metric's name) that `inspect` and error messages print. Control characters in them
//! could move the cursor, erase a line or reverse the text, painting a harmless-looking
//! command over the one that runs. [`escape_controls`] writes them visibly instead.

use std::borrow::Cow;
use std::fmt::Write;

/// Whether `c` changes how a terminal shows text: C0 controls, DEL, C1 controls, and the
/// Unicode bidirectional formatting characters.
pub fn is_control(c: char) -> bool {
    matches!(c,
        '\0'..='\x1f' | '\x7f'..='\u{9f}'
        | '\u{61c}' | '\u{200e}' | '\u{200f}' | '\u{202a}'..='\u{202e}' | '\u{2066}'..='\u{2069}')
}

/// `s` with every control character ([`is_control`]) written as an escape: `\t`, `\n`,
/// `\r`, `\xHH` for other C0, DEL and C1 characters, `\u{HHHH}` for bidirectional
/// formatting. Other text, backslashes included, is kept as is, so escaping twice gives
/// the same text.
///
/// ```
/// use waymark::escape::escape_controls;
/// assert_eq!(escape_controls("run\x1b[2K\rsafe"), r"run\x1b[2K\rsafe");
/// assert_eq!(escape_controls("Skärholm"), "Skärholm");
/// ```
pub fn escape_controls(s: &str) -> Cow<'_, str> {
    if !s.chars().any(is_control) {
        return Cow::Borrowed(s);
    }
    let mut out = String::with_capacity(s.len() + 8);
    for c in s.chars() {
        match c {
            '\t' => out.push_str(r"\t"),
            '\n' => out.push_str(r"\n"),
            '\r' => out.push_str(r"\r"),
            c if (c as u32) < 0x100 && is_control(c) => {
                let _ = write!(out, r"\x{:02x}", c as u32);
            }
            c if is_control(c) => {
                let _ = write!(out, r"\u{{{:x}}}", c as u32);
            }
            c => out.push(c),
        }
    }
    Cow::Owned(out)
}

/// Like [`escape_controls`], but keeps line breaks (`\n`): for messages of several lines.
pub fn escape_controls_keep_lines(s: &str) -> Cow<'_, str> {
    if !s.chars().any(|c| c != '\n' && is_control(c)) {
        return Cow::Borrowed(s);
    }
    Cow::Owned(
        s.split('\n')
            .map(|l| escape_controls(l).into_owned())
            .collect::<Vec<_>>()
            .join("\n"),
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn controls_are_escaped_and_other_text_kept() {
        assert_eq!(escape_controls("a\tb\nc\rd"), r"a\tb\nc\rd");
        assert_eq!(
            escape_controls("\x00\x1b\x7f\u{80}\u{9b}"),
            r"\x00\x1b\x7f\x80\x9b"
        );
        assert_eq!(escape_controls("x\u{202e}y\u{2066}"), r"x\u{202e}y\u{2066}");
        assert_eq!(escape_controls(r"C:\x1b é ü 字"), r"C:\x1b é ü 字");
        let once = escape_controls("\x1b[31m\u{202e}").into_owned();
        assert_eq!(escape_controls(&once), once);
        assert_eq!(escape_controls_keep_lines("a\x1b\nb\r"), "a\\x1b\nb\\r");
    }
}
