//! A tiny arithmetic language for linked fit parameters: `a.center + 5.9`,
//! `0.5 * a.area`, `-(b.fwhm) / 2`.
//!
//! Grammar (recursive descent, usual precedence, left-associative):
//! ```text
//! sum     := product (('+' | '-') product)*
//! product := unary (('*' | '/') unary)*
//! unary   := '-' unary | '+' unary | atom
//! atom    := number | name | '(' sum ')'
//! name    := [A-Za-z_][A-Za-z0-9_]* ('.' [A-Za-z_][A-Za-z0-9_]*)*
//! ```
//! Evaluation gives the value and the partial derivative with respect to every name,
//! so linked parameters can chain their derivatives into the Jacobian.

use std::fmt;

/// A parsed expression.
#[derive(Clone, Debug, PartialEq)]
pub enum Expr {
    Number(f64),
    Name(String),
    Neg(Box<Expr>),
    Add(Box<Expr>, Box<Expr>),
    Sub(Box<Expr>, Box<Expr>),
    Mul(Box<Expr>, Box<Expr>),
    Div(Box<Expr>, Box<Expr>),
}

/// What went wrong while parsing, with the 1-based character column.
#[derive(Clone, Debug, PartialEq)]
pub struct ParseError {
    pub column: usize,
    pub message: String,
}

impl fmt::Display for ParseError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "at character {}: {}", self.column, self.message)
    }
}

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Num(f64),
    Name(String),
    Op(char),
}

fn tokenize(src: &str) -> Result<Vec<(Tok, usize)>, ParseError> {
    let chars: Vec<char> = src.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        let col = i + 1;
        if c.is_whitespace() {
            i += 1;
        } else if "+-*/()".contains(c) {
            out.push((Tok::Op(c), col));
            i += 1;
        } else if c.is_ascii_digit() || c == '.' {
            let start = i;
            while i < chars.len() && (chars[i].is_ascii_digit() || chars[i] == '.') {
                i += 1;
            }
            // Exponent: e or E, optional sign, digits.
            if i < chars.len() && (chars[i] == 'e' || chars[i] == 'E') {
                let mut j = i + 1;
                if j < chars.len() && (chars[j] == '+' || chars[j] == '-') {
                    j += 1;
                }
                if j < chars.len() && chars[j].is_ascii_digit() {
                    while j < chars.len() && chars[j].is_ascii_digit() {
                        j += 1;
                    }
                    i = j;
                }
            }
            let text: String = chars[start..i].iter().collect();
            let v: f64 = text.parse().map_err(|_| ParseError {
                column: col,
                message: format!("'{text}' is not a number"),
            })?;
            out.push((Tok::Num(v), col));
        } else if c.is_ascii_alphabetic() || c == '_' {
            let start = i;
            while i < chars.len()
                && (chars[i].is_ascii_alphanumeric() || chars[i] == '_' || chars[i] == '.')
            {
                i += 1;
            }
            let text: String = chars[start..i].iter().collect();
            if text.ends_with('.') || text.contains("..") {
                return Err(ParseError {
                    column: col,
                    message: format!("'{text}' is not a parameter name (like a.center)"),
                });
            }
            out.push((Tok::Name(text), col));
        } else {
            return Err(ParseError {
                column: col,
                message: format!("unexpected character '{c}'"),
            });
        }
    }
    Ok(out)
}

struct Parser {
    toks: Vec<(Tok, usize)>,
    pos: usize,
    end_col: usize,
}

impl Parser {
    fn peek(&self) -> Option<&Tok> {
        self.toks.get(self.pos).map(|t| &t.0)
    }
    fn col(&self) -> usize {
        self.toks.get(self.pos).map_or(self.end_col, |t| t.1)
    }
    fn err<T>(&self, message: impl Into<String>) -> Result<T, ParseError> {
        Err(ParseError {
            column: self.col(),
            message: message.into(),
        })
    }
    fn sum(&mut self) -> Result<Expr, ParseError> {
        let mut lhs = self.product()?;
        while let Some(Tok::Op(c @ ('+' | '-'))) = self.peek().cloned() {
            self.pos += 1;
            let rhs = self.product()?;
            lhs = if c == '+' {
                Expr::Add(Box::new(lhs), Box::new(rhs))
            } else {
                Expr::Sub(Box::new(lhs), Box::new(rhs))
            };
        }
        Ok(lhs)
    }
    fn product(&mut self) -> Result<Expr, ParseError> {
        let mut lhs = self.unary()?;
        while let Some(Tok::Op(c @ ('*' | '/'))) = self.peek().cloned() {
            self.pos += 1;
            let rhs = self.unary()?;
            lhs = if c == '*' {
                Expr::Mul(Box::new(lhs), Box::new(rhs))
            } else {
                Expr::Div(Box::new(lhs), Box::new(rhs))
            };
        }
        Ok(lhs)
    }
    fn unary(&mut self) -> Result<Expr, ParseError> {
        match self.peek() {
            Some(Tok::Op('-')) => {
                self.pos += 1;
                Ok(Expr::Neg(Box::new(self.unary()?)))
            }
            Some(Tok::Op('+')) => {
                self.pos += 1;
                self.unary()
            }
            _ => self.atom(),
        }
    }
    fn atom(&mut self) -> Result<Expr, ParseError> {
        match self.peek().cloned() {
            Some(Tok::Num(v)) => {
                self.pos += 1;
                Ok(Expr::Number(v))
            }
            Some(Tok::Name(n)) => {
                self.pos += 1;
                Ok(Expr::Name(n))
            }
            Some(Tok::Op('(')) => {
                self.pos += 1;
                let e = self.sum()?;
                match self.peek() {
                    Some(Tok::Op(')')) => {
                        self.pos += 1;
                        Ok(e)
                    }
                    _ => self.err("expected ')'"),
                }
            }
            Some(Tok::Op(c)) => {
                self.err(format!("expected a number, a name or '(' but found '{c}'"))
            }
            None => self.err("the expression ends too early"),
        }
    }
}

impl Expr {
    /// Parses an expression; errors give the character column and what was expected.
    pub fn parse(src: &str) -> Result<Expr, ParseError> {
        let toks = tokenize(src)?;
        if toks.is_empty() {
            return Err(ParseError {
                column: 1,
                message: "the expression is empty".into(),
            });
        }
        let mut p = Parser {
            toks,
            pos: 0,
            end_col: src.chars().count() + 1,
        };
        let e = p.sum()?;
        if p.pos < p.toks.len() {
            return p.err("unexpected text after the end of the expression");
        }
        Ok(e)
    }

    /// Every name the expression refers to, in first-use order, without repeats.
    pub fn names(&self) -> Vec<String> {
        let mut out = Vec::new();
        self.collect(&mut out);
        out
    }
    fn collect(&self, out: &mut Vec<String>) {
        match self {
            Expr::Number(_) => {}
            Expr::Name(n) => {
                if !out.contains(n) {
                    out.push(n.clone());
                }
            }
            Expr::Neg(a) => a.collect(out),
            Expr::Add(a, b) | Expr::Sub(a, b) | Expr::Mul(a, b) | Expr::Div(a, b) => {
                a.collect(out);
                b.collect(out);
            }
        }
    }

    /// Value and the partial derivatives with respect to `names[k]`, where `lookup`
    /// gives each name's index into `values`. `grad` must have `values.len()` entries
    /// and is overwritten.
    pub fn eval_grad(
        &self,
        lookup: &dyn Fn(&str) -> Option<usize>,
        values: &[f64],
        grad: &mut [f64],
    ) -> Result<f64, String> {
        grad.iter_mut().for_each(|g| *g = 0.0);
        self.eval_into(lookup, values, grad, 1.0)
    }

    /// Value; adds `scale · ∂self/∂values[k]` into `grad[k]`.
    fn eval_into(
        &self,
        lookup: &dyn Fn(&str) -> Option<usize>,
        values: &[f64],
        grad: &mut [f64],
        scale: f64,
    ) -> Result<f64, String> {
        Ok(match self {
            Expr::Number(v) => *v,
            Expr::Name(n) => {
                let k = lookup(n).ok_or_else(|| format!("unknown parameter '{n}'"))?;
                grad[k] += scale;
                values[k]
            }
            Expr::Neg(a) => -a.eval_into(lookup, values, grad, -scale)?,
            Expr::Add(a, b) => {
                a.eval_into(lookup, values, grad, scale)?
                    + b.eval_into(lookup, values, grad, scale)?
            }
            Expr::Sub(a, b) => {
                a.eval_into(lookup, values, grad, scale)?
                    - b.eval_into(lookup, values, grad, -scale)?
            }
            Expr::Mul(a, b) => {
                // d(ab) = b da + a db: evaluate each side plainly first for the factors.
                let va = a.value(lookup, values)?;
                let vb = b.value(lookup, values)?;
                a.eval_into(lookup, values, grad, scale * vb)?;
                b.eval_into(lookup, values, grad, scale * va)?;
                va * vb
            }
            Expr::Div(a, b) => {
                let va = a.value(lookup, values)?;
                let vb = b.value(lookup, values)?;
                if vb == 0.0 {
                    return Err("division by zero".into());
                }
                a.eval_into(lookup, values, grad, scale / vb)?;
                b.eval_into(lookup, values, grad, -scale * va / (vb * vb))?;
                va / vb
            }
        })
    }

    /// Value only.
    pub fn value(
        &self,
        lookup: &dyn Fn(&str) -> Option<usize>,
        values: &[f64],
    ) -> Result<f64, String> {
        Ok(match self {
            Expr::Number(v) => *v,
            Expr::Name(n) => values[lookup(n).ok_or_else(|| format!("unknown parameter '{n}'"))?],
            Expr::Neg(a) => -a.value(lookup, values)?,
            Expr::Add(a, b) => a.value(lookup, values)? + b.value(lookup, values)?,
            Expr::Sub(a, b) => a.value(lookup, values)? - b.value(lookup, values)?,
            Expr::Mul(a, b) => a.value(lookup, values)? * b.value(lookup, values)?,
            Expr::Div(a, b) => {
                let vb = b.value(lookup, values)?;
                if vb == 0.0 {
                    return Err("division by zero".into());
                }
                a.value(lookup, values)? / vb
            }
        })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn ev(src: &str, names: &[&str], vals: &[f64]) -> (f64, Vec<f64>) {
        let e = Expr::parse(src).unwrap();
        let lookup = |n: &str| names.iter().position(|m| *m == n);
        let mut g = vec![0.0; vals.len()];
        let v = e.eval_grad(&lookup, vals, &mut g).unwrap();
        (v, g)
    }

    #[test]
    fn precedence_unary_minus_and_parentheses() {
        // Analytic: ordinary arithmetic.
        assert_eq!(ev("1 + 2 * 3", &[], &[]).0, 7.0);
        assert_eq!(ev("(1 + 2) * 3", &[], &[]).0, 9.0);
        assert_eq!(ev("-2 * -3", &[], &[]).0, 6.0);
        assert_eq!(ev("8 / 4 / 2", &[], &[]).0, 1.0);
        assert_eq!(ev("10 - 4 - 3", &[], &[]).0, 3.0);
        assert_eq!(ev("1.5e1 + 2E-1", &[], &[]).0, 15.2);
    }

    #[test]
    fn names_and_derivatives() {
        let (v, g) = ev("a.center + 5.9", &["a.center"], &[284.8]);
        assert!((v - 290.7).abs() < 1e-12 && g == vec![1.0]);
        let (v, g) = ev("0.5 * a.area", &["a.area"], &[10.0]);
        assert!(v == 5.0 && g == vec![0.5]);
        // d(a*b/(a-b)) at a=3, b=1: value 1.5; d/da = (b(a-b) - ab)/(a-b)^2 = -b²/(a-b)² = -0.25,
        // d/db = a²/(a-b)² = 2.25.
        let (v, g) = ev("a * b / (a - b)", &["a", "b"], &[3.0, 1.0]);
        assert!((v - 1.5).abs() < 1e-15);
        assert!((g[0] + 0.25).abs() < 1e-15 && (g[1] - 2.25).abs() < 1e-15);
        let (v, g) = ev("-(x) - -x", &["x"], &[2.0]);
        assert!(v == 0.0 && g == vec![0.0]);
    }

    #[test]
    fn errors_say_where_and_what() {
        let e = Expr::parse("a.center +").unwrap_err();
        assert_eq!(e.column, 11);
        assert!(e.message.contains("ends too early"));
        let e = Expr::parse("2 * (a + 1").unwrap_err();
        assert!(e.message.contains("')'"), "{e}");
        let e = Expr::parse("a $ b").unwrap_err();
        assert_eq!(e.column, 3);
        let e = Expr::parse("a b").unwrap_err();
        assert!(e.message.contains("after the end"));
        assert!(Expr::parse("").is_err());
        assert!(Expr::parse("a.").is_err());
        let x = Expr::parse("1 / a").unwrap();
        let lookup = |n: &str| (n == "a").then_some(0);
        assert!(x.value(&lookup, &[0.0]).is_err());
        assert!(Expr::parse("q").unwrap().value(&lookup, &[1.0]).is_err());
    }
}
