//! Sizes of source files and functions.
//!
//! A function counts from the line of its `fn` keyword to the line of its closing brace, both
//! included (in rustfmt-formatted code that brace sits at the `fn` line's indentation). Attributes
//! and doc comments above it are not counted; a function nested in another counts on its own and
//! inside the outer one. Declarations without a body (`fn f();` in a trait) are skipped.

use super::lexer::{blank, tokens};

/// One function's extent.
#[derive(Clone, Debug, PartialEq)]
pub struct FnSpan {
    /// Its name.
    pub name: String,
    /// Line of `fn` (1-based).
    pub start: usize,
    /// Line of the closing brace.
    pub end: usize,
}

impl FnSpan {
    /// Lines from `fn` to the closing brace, both included.
    pub fn lines(&self) -> usize {
        self.end - self.start + 1
    }
}

/// Every function with a body in `text`.
pub fn functions(text: &str) -> Vec<FnSpan> {
    let toks = tokens(&blank(text));
    let mut out = Vec::new();
    for (i, t) in toks.iter().enumerate() {
        let named = toks.get(i + 1).is_some_and(|n| {
            n.text
                .chars()
                .next()
                .is_some_and(|c| c.is_alphabetic() || c == '_')
        });
        if t.text != "fn" || !named {
            continue;
        }
        // The body opens at the first `{` outside parentheses and brackets; a `;` first means
        // there is no body.
        let mut nest = 0i64;
        let mut open = None;
        for (k, u) in toks.iter().enumerate().skip(i + 2) {
            match u.text.as_str() {
                "(" | "[" => nest += 1,
                ")" | "]" => nest -= 1,
                "{" if nest == 0 => {
                    open = Some(k);
                    break;
                }
                ";" if nest == 0 => break,
                _ => {}
            }
        }
        let Some(open) = open else { continue };
        let mut depth = 0usize;
        let close = toks.iter().enumerate().skip(open).find_map(|(k, u)| {
            match u.text.as_str() {
                "{" => depth += 1,
                "}" => {
                    depth -= 1;
                    if depth == 0 {
                        return Some(k);
                    }
                }
                _ => {}
            }
            None
        });
        if let Some(close) = close {
            out.push(FnSpan {
                name: toks[i + 1].text.clone(),
                start: t.line,
                end: toks[close].line,
            });
        }
    }
    out
}

#[test]
fn counts_functions_from_fn_to_their_closing_brace() {
    let src = "\
/// Doc.
#[inline]
pub fn short() -> u8 { 1 }

pub(crate) fn long(
    a: [u8; 2],
) -> u8
where
    u8: Copy,
{
    let s = \"}\"; // }
    fn inner() {}
    if a[0] > 0 {
        a[1]
    } else {
        0
    }
}

trait T {
    fn declared(&self);
    fn defaulted(&self) -> usize {
        let f: fn(u8) -> u8 = |x| x;
        f(1) as usize
    }
}
";
    let spans = functions(src);
    let got: Vec<(&str, usize)> = spans.iter().map(|s| (s.name.as_str(), s.lines())).collect();
    assert_eq!(
        got,
        vec![("short", 1), ("long", 14), ("inner", 1), ("defaulted", 4)]
    );
    assert_eq!((spans[1].start, spans[1].end), (5, 18));
}
