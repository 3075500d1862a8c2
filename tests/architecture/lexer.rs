//! A small Rust lexer, just enough to read module paths: comments, string and character literals
//! are blanked (newlines kept, so line numbers stay right), and what remains is split into
//! identifiers and punctuation.
//!
//! One exception: a string literal that holds a module path (`#[serde(with = "super::persist")]`)
//! is kept as a path, because it names a module the code depends on.

/// One token with its 1-based line.
#[derive(Clone, Debug, PartialEq)]
pub struct Token {
    /// The text: an identifier, `::`, or one punctuation character.
    pub text: String,
    /// Line of the token.
    pub line: usize,
}

fn is_ident_start(c: char) -> bool {
    c.is_alphabetic() || c == '_'
}

fn is_ident(c: char) -> bool {
    c.is_alphanumeric() || c == '_'
}

/// Whether `s` reads as a module path starting at `crate`, `super` or `self`.
fn is_module_path(s: &str) -> bool {
    let parts: Vec<&str> = s.split("::").collect();
    parts.len() >= 2
        && matches!(parts[0], "crate" | "super" | "self")
        && parts
            .iter()
            .all(|p| !p.is_empty() && p.chars().all(is_ident))
}

/// The source with comments, strings and character literals replaced by spaces (newlines kept).
/// A string literal holding a module path keeps its contents (quotes blanked).
pub fn blank(src: &str) -> String {
    let c: Vec<char> = src.chars().collect();
    let mut out = String::with_capacity(src.len());
    let mut i = 0;
    let blank_range = |out: &mut String, chars: &[char]| {
        for &ch in chars {
            out.push(if ch == '\n' { '\n' } else { ' ' });
        }
    };
    while i < c.len() {
        let prev_ident = i > 0 && is_ident(c[i - 1]);
        if c[i] == '/' && c.get(i + 1) == Some(&'/') {
            let end = (i..c.len()).find(|&k| c[k] == '\n').unwrap_or(c.len());
            blank_range(&mut out, &c[i..end]);
            i = end;
        } else if c[i] == '/' && c.get(i + 1) == Some(&'*') {
            let mut depth = 0usize;
            let mut k = i;
            while k < c.len() {
                if c[k] == '/' && c.get(k + 1) == Some(&'*') {
                    depth += 1;
                    k += 2;
                } else if c[k] == '*' && c.get(k + 1) == Some(&'/') {
                    depth -= 1;
                    k += 2;
                    if depth == 0 {
                        break;
                    }
                } else {
                    k += 1;
                }
            }
            let end = k.min(c.len());
            blank_range(&mut out, &c[i..end]);
            i = end;
        } else if (c[i] == 'r' || (c[i] == 'b' && c.get(i + 1) == Some(&'r'))) && !prev_ident {
            // Possibly a raw string: r"..", r#".."#, br#".."#.
            let start = i;
            let mut k = if c[i] == 'b' { i + 2 } else { i + 1 };
            let mut hashes = 0;
            while c.get(k) == Some(&'#') {
                hashes += 1;
                k += 1;
            }
            if c.get(k) == Some(&'"') {
                k += 1;
                let close: Vec<char> = std::iter::once('"')
                    .chain(std::iter::repeat_n('#', hashes))
                    .collect();
                while k < c.len() && !c[k..].starts_with(&close) {
                    k += 1;
                }
                let end = (k + close.len()).min(c.len());
                blank_range(&mut out, &c[start..end]);
                i = end;
            } else {
                out.push(c[i]);
                i += 1;
            }
        } else if c[i] == '"' {
            let mut k = i + 1;
            while k < c.len() && c[k] != '"' {
                k += if c[k] == '\\' { 2 } else { 1 };
            }
            let end = (k + 1).min(c.len());
            let inner: String = c[i + 1..k.min(c.len())].iter().collect();
            if is_module_path(&inner) {
                out.push(' ');
                out.push_str(&inner);
                out.push(' ');
            } else {
                blank_range(&mut out, &c[i..end]);
            }
            i = end;
        } else if c[i] == '\'' {
            // A character literal ('x', '\n', '\u{..}') or a lifetime ('a).
            if c.get(i + 1) == Some(&'\\') {
                let mut k = i + 3;
                while k < c.len() && c[k] != '\'' {
                    k += 1;
                }
                let end = (k + 1).min(c.len());
                blank_range(&mut out, &c[i..end]);
                i = end;
            } else if c.get(i + 2) == Some(&'\'') {
                blank_range(&mut out, &c[i..i + 3]);
                i += 3;
            } else {
                out.push(' ');
                i += 1;
            }
        } else {
            out.push(c[i]);
            i += 1;
        }
    }
    out
}

/// Tokens of blanked source: identifiers (keywords included), `::`, and single punctuation
/// characters. Numbers come out as identifiers, which is harmless here.
pub fn tokens(blanked: &str) -> Vec<Token> {
    let c: Vec<char> = blanked.chars().collect();
    let mut out = Vec::new();
    let mut line = 1;
    let mut i = 0;
    while i < c.len() {
        let ch = c[i];
        if ch == '\n' {
            line += 1;
            i += 1;
        } else if ch.is_whitespace() {
            i += 1;
        } else if is_ident_start(ch) || ch.is_ascii_digit() {
            let start = i;
            while i < c.len() && is_ident(c[i]) {
                i += 1;
            }
            out.push(Token {
                text: c[start..i].iter().collect(),
                line,
            });
        } else if ch == ':' && c.get(i + 1) == Some(&':') {
            out.push(Token {
                text: "::".into(),
                line,
            });
            i += 2;
        } else {
            out.push(Token {
                text: ch.to_string(),
                line,
            });
            i += 1;
        }
    }
    out
}

#[test]
fn comments_strings_and_chars_are_blanked_but_paths_in_strings_kept() {
    let src = "use a::b; // use hid1::x;\n/* use hid2::y; /* nested */ */ let s = \"use hid3::z;\";\n\
               let r = r#\"crate::x::y \"hid4\"\"#; let c = '{'; let l: &'a str = x;\n\
               #[serde(with = \"super::persist::exact\")]";
    let b = blank(src);
    assert_eq!(b.lines().count(), src.lines().count(), "newlines are kept");
    let words: Vec<String> = tokens(&b).into_iter().map(|t| t.text).collect();
    let joined = words.join(" ");
    assert!(joined.starts_with("use a :: b ;"), "{joined}");
    for hidden in ["hid1", "hid2", "hid3", "hid4", "{"] {
        assert!(!words.contains(&hidden.to_string()), "{hidden} in {joined}");
    }
    assert!(joined.contains("super :: persist :: exact"), "{joined}");
    assert!(
        joined.contains("& a str"),
        "a lifetime is not a character: {joined}"
    );
}
