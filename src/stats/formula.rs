//! Model formulas in Wilkinson-Rogers notation (Wilkinson and Rogers 1973,
//! "Symbolic description of factorial models for analysis of variance",
//! Applied Statistics 22, 392-399), the additive subset used by a
//! vertex-wise linear model.
//!
//! In: text such as `thickness ~ group + age + sex`, `y ~ 0 + group` or
//! `y ~ group - 1`. Out: a [`Formula`]: the response name, whether the model
//! has an intercept, and the main-effect terms in the order written.
//!
//! What stays true: terms are plain column names (letters, digits, `_`,
//! `-`, `.`); `1` adds the intercept (the default), `0` or `- 1` removes it;
//! a term named twice is an error; interactions (`:`, `*`) are refused with
//! a clear message rather than silently misread.

use crate::error::{Error, Result};

/// A parsed model formula.
#[derive(Debug, Clone, PartialEq)]
pub struct Formula {
    /// Left-hand side (the mapped measure, e.g. `thickness`); informative only.
    pub response: String,
    /// Whether the model has an intercept column.
    pub intercept: bool,
    /// Main-effect terms (participants-table column names), in order.
    pub terms: Vec<String>,
}

fn bad(text: &str, msg: impl Into<String>) -> Error {
    Error::Invalid(format!("formula '{text}': {}", msg.into()))
}

/// Parse a formula (see the module documentation).
pub fn parse(text: &str) -> Result<Formula> {
    let (lhs, rhs) = text
        .split_once('~')
        .ok_or_else(|| bad(text, "expected 'response ~ term + term ...'"))?;
    let response = lhs.trim().to_string();
    if response.is_empty() {
        return Err(bad(text, "the response (left of '~') is empty"));
    }
    if rhs.contains('~') {
        return Err(bad(text, "more than one '~'"));
    }
    for op in [':', '*', '/', '^', '(', ')'] {
        if rhs.contains(op) {
            return Err(bad(
                text,
                format!("operator '{op}' is not supported; expected main effects joined by '+'"),
            ));
        }
    }
    // Tokenise into signed terms.
    let mut intercept = true;
    let mut terms: Vec<String> = Vec::new();
    let mut sign = '+';
    let mut cur = String::new();
    let mut items: Vec<(char, String)> = Vec::new();
    for ch in rhs.chars() {
        // A '-' right after a name character is part of the name
        // (e.g. `left-handed`); otherwise it is the removal operator.
        let glued = ch == '-' && cur.chars().last().is_some_and(|c| c.is_alphanumeric());
        if (ch == '+' || ch == '-') && !glued {
            if cur.trim().is_empty() {
                if !items.is_empty() || sign != '+' {
                    return Err(bad(text, "empty term between operators"));
                }
            } else {
                items.push((sign, cur.trim().to_string()));
            }
            sign = ch;
            cur.clear();
        } else {
            cur.push(ch);
        }
    }
    if cur.trim().is_empty() {
        return Err(bad(
            text,
            "the formula ends with an operator or has no terms",
        ));
    }
    items.push((sign, cur.trim().to_string()));
    let flat = items;
    for (s, t) in flat {
        if t.is_empty() {
            return Err(bad(text, "empty term"));
        }
        match (s, t.as_str()) {
            ('+', "1") => intercept = true,
            ('+', "0") | ('-', "1") => intercept = false,
            ('-', _) => {
                return Err(bad(
                    text,
                    format!("removing term '{t}' is not supported; only '- 1' (no intercept)"),
                ))
            }
            _ => {
                if !t
                    .chars()
                    .all(|c| c.is_alphanumeric() || c == '_' || c == '-' || c == '.')
                {
                    return Err(bad(
                        text,
                        format!("term '{t}' is not a column name (letters, digits, '_', '-', '.')"),
                    ));
                }
                if terms.contains(&t) {
                    return Err(bad(text, format!("term '{t}' appears twice")));
                }
                terms.push(t);
            }
        }
    }
    if terms.is_empty() && !intercept {
        return Err(bad(text, "no terms and no intercept: the model is empty"));
    }
    Ok(Formula {
        response,
        intercept,
        terms,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_terms_and_intercept() {
        let f = parse("thickness ~ group + age + sex").unwrap();
        assert_eq!(f.response, "thickness");
        assert!(f.intercept);
        assert_eq!(f.terms, vec!["group", "age", "sex"]);
        let g = parse("y ~ 0 + group").unwrap();
        assert!(!g.intercept);
        assert_eq!(g.terms, vec!["group"]);
        let h = parse("y ~ group + age - 1").unwrap();
        assert!(!h.intercept);
        assert_eq!(h.terms, vec!["group", "age"]);
        let k = parse("y~left-handed").unwrap();
        assert_eq!(k.terms, vec!["left-handed"]);
    }

    #[test]
    fn refuses_bad_formulas() {
        for t in [
            "thickness group",
            "~ a",
            "y ~ a + a",
            "y ~ a:b",
            "y ~ a +",
            "y ~ a - b",
            "y ~ 0",
        ] {
            assert!(parse(t).is_err(), "{t} should be refused");
        }
    }
}
