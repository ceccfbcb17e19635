//! Band math: user expressions over band roles, compiled once, evaluated block by block.
//!
//! An expression names bands by their role (`nir`, `red`, `rededge`, `green`, `blue`, or
//! the NAME of a band declared as `extra:NAME` in the band map) and combines them with numbers, arithmetic, comparisons, logic,
//! a conditional and a few functions:
//!
//! ```text
//! (nir - red) / (nir + red)
//! if nir > 0.3 and red < 0.1 then 1 else 0
//! clamp(2.5 * (nir - red) / (nir + 2.4 * red + 1), -1, 1)
//! ```
//!
//! Grammar (EBNF; whitespace between tokens is ignored, names are case-insensitive):
//!
//! ```text
//! expression  = conditional ;
//! conditional = "if" expression "then" expression "else" expression
//!             | disjunction ;
//! disjunction = conjunction { "or" conjunction } ;
//! conjunction = negation { "and" negation } ;
//! negation    = "not" negation | comparison ;
//! comparison  = sum [ ( "<" | "<=" | ">" | ">=" | "==" | "!=" ) sum ] ;
//! sum         = product { ( "+" | "-" ) product } ;
//! product     = signed { ( "*" | "/" ) signed } ;
//! signed      = "-" signed | power ;
//! power       = primary [ "^" signed ] ;          (* right-associative: 2^3^2 = 2^9 *)
//! primary     = number | function "(" arguments ")" | role | "(" expression ")" ;
//! arguments   = expression { "," expression } ;
//! function    = "min" | "max" | "abs" | "sqrt" | "ln" | "exp" | "clamp" ;
//! number      = digits [ "." digits ] [ exponent ] | "." digits [ exponent ] ;
//! exponent    = ( "e" | "E" ) [ "+" | "-" ] digits ;
//! role        = letter { letter | digit | "_" } ;  (* not a keyword or function *)
//! ```
//!
//! `-x^2` is `-(x^2)`. Comparisons do not chain (`a < b < c` is refused). `min` and `max`
//! take two or more arguments, `clamp(x, lo, hi)` three, the others one.
//!
//! Semantics, cell by cell in f64, rounded once to f32 at the end: a comparison is 1 when
//! true and 0 when false; `and`, `or`, `not` and `if` treat any non-zero value as true. NaN
//! is nodata and propagates through every operation (a NaN condition gives NaN). Undefined
//! results are NaN, never ±inf: division by zero, `sqrt` of a negative number, `ln` of zero
//! or a negative number, `0^-1`, any overflow, and `clamp` with `lo > hi`.
//!
//! The text is parsed once into a short postfix program; evaluation runs that program over
//! runs of a few thousand cells at a time, in parallel across runs, so the cost per cell is a
//! handful of vector operations and does not depend on the block size. A syntax error gives
//! the column and a caret under the offending character.

use ndarray::Array2;
use rayon::prelude::*;

use crate::error::{Error, Result};
use crate::spectral::roles::{BandArrays, Role, RESERVED_NAMES};

/// Cells evaluated together by one pass of the program.
const RUN: usize = 2048;

/// Longest expression text accepted, in characters. The longest catalogue formula written
/// as band math is under 100 characters; this leaves room for generous user formulas
/// while keeping parsing and the evaluation stack small.
pub const MAX_EXPRESSION_CHARS: usize = 2000;

/// Deepest nesting accepted: parentheses, function calls, `if`, `not`, unary minus and
/// the exponent of `^` each open one level. The parser recurses once per level, so this
/// bounds its stack use on any thread.
pub const MAX_NESTING: usize = 64;

#[derive(Clone, Copy, Debug, PartialEq)]
enum BinOp {
    Add,
    Sub,
    Mul,
    Div,
    Pow,
    Lt,
    Le,
    Gt,
    Ge,
    Eq,
    Ne,
    And,
    Or,
}

#[derive(Clone, Copy, Debug, PartialEq)]
enum Func {
    Min,
    Max,
    Abs,
    Sqrt,
    Ln,
    Exp,
    Clamp,
}

impl Func {
    fn from_name(name: &str) -> Option<Func> {
        Some(match name {
            "min" => Func::Min,
            "max" => Func::Max,
            "abs" => Func::Abs,
            "sqrt" => Func::Sqrt,
            "ln" => Func::Ln,
            "exp" => Func::Exp,
            "clamp" => Func::Clamp,
            _ => return None,
        })
    }

    /// Accepted argument counts (min, max).
    fn arity(self) -> (usize, usize) {
        match self {
            Func::Min | Func::Max => (2, usize::MAX),
            Func::Clamp => (3, 3),
            _ => (1, 1),
        }
    }

    fn name(self) -> &'static str {
        match self {
            Func::Min => "min",
            Func::Max => "max",
            Func::Abs => "abs",
            Func::Sqrt => "sqrt",
            Func::Ln => "ln",
            Func::Exp => "exp",
            Func::Clamp => "clamp",
        }
    }
}

/// One instruction of the compiled (postfix) program.
#[derive(Clone, Debug, PartialEq)]
enum Instr {
    Const(f64),
    /// Push the band at this index of [`Expression::roles`].
    Band(usize),
    Neg,
    Not,
    Bin(BinOp),
    Call(Func, usize),
    /// Pop else, then, condition; push the chosen value.
    Select,
}

/// A compiled band-math expression.
#[derive(Clone, Debug, PartialEq)]
pub struct Expression {
    name: String,
    text: String,
    roles: Vec<Role>,
    program: Vec<Instr>,
    depth: usize,
}

#[derive(Clone, Debug, PartialEq)]
enum Tok {
    Num(f64),
    Name(String),
    Sym(&'static str),
    End,
}

struct Token {
    tok: Tok,
    /// Character (not byte) offset of the token's first character.
    at: usize,
}

fn syntax_error(name: &str, text: &str, at: usize, problem: impl Into<String>) -> Error {
    // One line for the text, with tabs and newlines shown as spaces so the caret lines up.
    let shown: String = text
        .chars()
        .map(|c| if c.is_whitespace() { ' ' } else { c })
        .collect();
    Error::usage(format!(
        "expression `{name}`: {} at column {}\n    {shown}\n    {}^",
        problem.into(),
        at + 1,
        " ".repeat(at)
    ))
    .with_fix(
        "see `terrastack features` for the band-math grammar, e.g. `(nir - red) / (nir + red)`",
    )
}

fn tokenize(name: &str, text: &str) -> Result<Vec<Token>> {
    let chars: Vec<char> = text.chars().collect();
    let mut out = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let c = chars[i];
        if c.is_whitespace() {
            i += 1;
            continue;
        }
        let start = i;
        if c.is_ascii_digit() || (c == '.' && chars.get(i + 1).is_some_and(|d| d.is_ascii_digit()))
        {
            while i < chars.len() && (chars[i].is_ascii_digit() || chars[i] == '.') {
                i += 1;
            }
            if i < chars.len() && (chars[i] == 'e' || chars[i] == 'E') {
                let mut j = i + 1;
                if j < chars.len() && (chars[j] == '+' || chars[j] == '-') {
                    j += 1;
                }
                if j < chars.len() && chars[j].is_ascii_digit() {
                    i = j;
                    while i < chars.len() && chars[i].is_ascii_digit() {
                        i += 1;
                    }
                }
            }
            let s: String = chars[start..i].iter().collect();
            let v: f64 = s
                .parse()
                .map_err(|_| syntax_error(name, text, start, format!("`{s}` is not a number")))?;
            out.push(Token {
                tok: Tok::Num(v),
                at: start,
            });
            continue;
        }
        if c.is_alphabetic() || c == '_' {
            while i < chars.len() && (chars[i].is_alphanumeric() || chars[i] == '_') {
                i += 1;
            }
            let s: String = chars[start..i].iter().collect::<String>().to_lowercase();
            out.push(Token {
                tok: Tok::Name(s),
                at: start,
            });
            continue;
        }
        let two: String = chars[i..(i + 2).min(chars.len())].iter().collect();
        let sym: &'static str = match two.as_str() {
            "<=" => "<=",
            ">=" => ">=",
            "==" => "==",
            "!=" => "!=",
            _ => match c {
                '+' => "+",
                '-' | '−' => "-",
                '*' | '×' => "*",
                '/' => "/",
                '^' => "^",
                '<' => "<",
                '>' => ">",
                '(' => "(",
                ')' => ")",
                ',' => ",",
                '=' => {
                    return Err(syntax_error(
                        name,
                        text,
                        start,
                        "a single `=` is not an operator (compare with `==`)",
                    ))
                }
                _ => {
                    return Err(syntax_error(
                        name,
                        text,
                        start,
                        format!("unexpected character `{c}`"),
                    ))
                }
            },
        };
        // Typographic variants (− ×) are one character, like every one-byte operator.
        i += if sym.len() == 2 { 2 } else { 1 };
        out.push(Token {
            tok: Tok::Sym(sym),
            at: start,
        });
    }
    out.push(Token {
        tok: Tok::End,
        at: chars.len(),
    });
    Ok(out)
}

struct Parser<'a> {
    name: &'a str,
    text: &'a str,
    tokens: Vec<Token>,
    pos: usize,
    program: Vec<Instr>,
    roles: Vec<Role>,
    /// Nesting levels open at `pos` (see [`MAX_NESTING`]).
    depth: usize,
}

impl Parser<'_> {
    /// Run `inner` one nesting level deeper, refusing to pass [`MAX_NESTING`].
    fn nested(&mut self, inner: impl FnOnce(&mut Self) -> Result<()>) -> Result<()> {
        if self.depth >= MAX_NESTING {
            return Err(self
                .err(format!(
                    "the expression nests deeper than {MAX_NESTING} levels (parentheses, calls, `if`, `not`, `-`, `^`)"
                ))
                .with_fix("split the formula into several --index layers, or remove redundant parentheses"));
        }
        self.depth += 1;
        let r = inner(self);
        self.depth -= 1;
        r
    }

    fn peek(&self) -> &Tok {
        &self.tokens[self.pos].tok
    }

    fn at(&self) -> usize {
        self.tokens[self.pos].at
    }

    fn err(&self, problem: impl Into<String>) -> Error {
        syntax_error(self.name, self.text, self.at(), problem)
    }

    fn unexpected(&self, wanted: &str) -> Error {
        let found = match self.peek() {
            Tok::Num(_) => "a number".to_string(),
            Tok::Name(n) => format!("`{n}`"),
            Tok::Sym(s) => format!("`{s}`"),
            Tok::End => "the end of the expression".to_string(),
        };
        self.err(format!("expected {wanted}, found {found}"))
    }

    fn is_sym(&self, s: &str) -> bool {
        matches!(self.peek(), Tok::Sym(t) if *t == s)
    }

    fn is_word(&self, w: &str) -> bool {
        matches!(self.peek(), Tok::Name(n) if n == w)
    }

    fn expect_sym(&mut self, s: &str) -> Result<()> {
        if self.is_sym(s) {
            self.pos += 1;
            Ok(())
        } else {
            Err(self.unexpected(&format!("`{s}`")))
        }
    }

    fn expression(&mut self) -> Result<()> {
        self.nested(Self::conditional)
    }

    fn conditional(&mut self) -> Result<()> {
        if self.is_word("if") {
            self.pos += 1;
            self.expression()?;
            if !self.is_word("then") {
                return Err(self.unexpected("`then`"));
            }
            self.pos += 1;
            self.expression()?;
            if !self.is_word("else") {
                return Err(self.unexpected("`else`"));
            }
            self.pos += 1;
            self.expression()?;
            self.program.push(Instr::Select);
            return Ok(());
        }
        self.conjunction()?;
        while self.is_word("or") {
            self.pos += 1;
            self.conjunction()?;
            self.program.push(Instr::Bin(BinOp::Or));
        }
        Ok(())
    }

    fn conjunction(&mut self) -> Result<()> {
        self.negation()?;
        while self.is_word("and") {
            self.pos += 1;
            self.negation()?;
            self.program.push(Instr::Bin(BinOp::And));
        }
        Ok(())
    }

    fn negation(&mut self) -> Result<()> {
        if self.is_word("not") {
            self.pos += 1;
            self.nested(Self::negation)?;
            self.program.push(Instr::Not);
            return Ok(());
        }
        self.comparison()
    }

    fn comparison_op(&self) -> Option<BinOp> {
        match self.peek() {
            Tok::Sym("<") => Some(BinOp::Lt),
            Tok::Sym("<=") => Some(BinOp::Le),
            Tok::Sym(">") => Some(BinOp::Gt),
            Tok::Sym(">=") => Some(BinOp::Ge),
            Tok::Sym("==") => Some(BinOp::Eq),
            Tok::Sym("!=") => Some(BinOp::Ne),
            _ => None,
        }
    }

    fn comparison(&mut self) -> Result<()> {
        self.sum()?;
        if let Some(op) = self.comparison_op() {
            self.pos += 1;
            self.sum()?;
            self.program.push(Instr::Bin(op));
            if self.comparison_op().is_some() {
                return Err(self.err("comparisons do not chain; join them with `and`"));
            }
        }
        Ok(())
    }

    fn sum(&mut self) -> Result<()> {
        self.product()?;
        loop {
            let op = if self.is_sym("+") {
                BinOp::Add
            } else if self.is_sym("-") {
                BinOp::Sub
            } else {
                return Ok(());
            };
            self.pos += 1;
            self.product()?;
            self.program.push(Instr::Bin(op));
        }
    }

    fn product(&mut self) -> Result<()> {
        self.signed()?;
        loop {
            let op = if self.is_sym("*") {
                BinOp::Mul
            } else if self.is_sym("/") {
                BinOp::Div
            } else {
                return Ok(());
            };
            self.pos += 1;
            self.signed()?;
            self.program.push(Instr::Bin(op));
        }
    }

    fn signed(&mut self) -> Result<()> {
        if self.is_sym("-") {
            self.pos += 1;
            self.nested(Self::signed)?;
            self.program.push(Instr::Neg);
            return Ok(());
        }
        self.power()
    }

    fn power(&mut self) -> Result<()> {
        self.primary()?;
        if self.is_sym("^") {
            self.pos += 1;
            self.nested(Self::signed)?;
            self.program.push(Instr::Bin(BinOp::Pow));
        }
        Ok(())
    }

    fn primary(&mut self) -> Result<()> {
        match self.peek().clone() {
            Tok::Num(v) => {
                self.pos += 1;
                self.program.push(Instr::Const(v));
                Ok(())
            }
            Tok::Sym("(") => {
                self.pos += 1;
                self.expression()?;
                self.expect_sym(")")
            }
            Tok::Name(word) => {
                if let Some(func) = Func::from_name(&word) {
                    let call_at = self.at();
                    self.pos += 1;
                    if !self.is_sym("(") {
                        return Err(self.unexpected(&format!("`(` after `{word}`")));
                    }
                    self.pos += 1;
                    let mut argc = 1;
                    self.expression()?;
                    while self.is_sym(",") {
                        self.pos += 1;
                        self.expression()?;
                        argc += 1;
                    }
                    self.expect_sym(")")?;
                    let (lo, hi) = func.arity();
                    if argc < lo || argc > hi {
                        let wanted = match (lo, hi) {
                            (1, 1) => "one argument".to_string(),
                            (3, 3) => "three arguments (x, lo, hi)".to_string(),
                            _ => format!("at least {lo} arguments"),
                        };
                        return Err(syntax_error(
                            self.name,
                            self.text,
                            call_at,
                            format!("`{}` takes {wanted}, not {argc}", func.name()),
                        ));
                    }
                    self.program.push(Instr::Call(func, argc));
                    return Ok(());
                }
                if RESERVED_NAMES.contains(&word.as_str()) {
                    return Err(self.err(format!("`{word}` is a keyword and cannot stand here")));
                }
                let role = Role::named(&word).map_err(|e| {
                    let hint = match &e {
                        Error::Usage { fix: Some(f), .. } => format!(" ({f})"),
                        _ => String::new(),
                    };
                    self.err(format!("`{word}` is not a band role{hint}"))
                })?;
                let index = match self.roles.iter().position(|r| *r == role) {
                    Some(i) => i,
                    None => {
                        self.roles.push(role);
                        self.roles.len() - 1
                    }
                };
                self.pos += 1;
                self.program.push(Instr::Band(index));
                Ok(())
            }
            _ => Err(self.unexpected("a number, a band role, a function or `(`")),
        }
    }
}

/// Stack depth the program needs (for allocating evaluation buffers).
fn stack_depth(program: &[Instr]) -> usize {
    let (mut depth, mut max) = (0usize, 0usize);
    for instr in program {
        match instr {
            Instr::Const(_) | Instr::Band(_) => depth += 1,
            Instr::Neg | Instr::Not => {}
            Instr::Bin(_) => depth -= 1,
            Instr::Call(_, n) => depth = depth + 1 - n,
            Instr::Select => depth -= 2,
        }
        max = max.max(depth);
    }
    max
}

#[inline]
fn defined(v: f64) -> f64 {
    if v.is_finite() {
        v
    } else {
        f64::NAN
    }
}

#[inline]
fn truth(v: bool) -> f64 {
    if v {
        1.0
    } else {
        0.0
    }
}

#[inline]
fn binary(op: BinOp, a: f64, b: f64) -> f64 {
    if a.is_nan() || b.is_nan() {
        return f64::NAN;
    }
    defined(match op {
        BinOp::Add => a + b,
        BinOp::Sub => a - b,
        BinOp::Mul => a * b,
        BinOp::Div => {
            if b == 0.0 {
                f64::NAN
            } else {
                a / b
            }
        }
        BinOp::Pow => a.powf(b),
        BinOp::Lt => truth(a < b),
        BinOp::Le => truth(a <= b),
        BinOp::Gt => truth(a > b),
        BinOp::Ge => truth(a >= b),
        BinOp::Eq => truth(a == b),
        BinOp::Ne => truth(a != b),
        BinOp::And => truth(a != 0.0 && b != 0.0),
        BinOp::Or => truth(a != 0.0 || b != 0.0),
    })
}

#[inline]
fn unary(func: Func, x: f64) -> f64 {
    defined(match func {
        Func::Abs => x.abs(),
        Func::Sqrt => x.sqrt(),
        Func::Ln => {
            if x > 0.0 {
                x.ln()
            } else {
                f64::NAN
            }
        }
        Func::Exp => x.exp(),
        _ => f64::NAN,
    })
}

impl Expression {
    /// Parse and compile `text` as the layer called `name` (letters, digits and `_`,
    /// starting with a letter). Syntax errors give the column and a caret under the text.
    ///
    /// ```
    /// use terrastack::spectral::Expression;
    /// let e = Expression::parse("ndvi_gate", "if nir > 0.3 then (nir - red) / (nir + red) else 0")?;
    /// assert_eq!(e.roles().len(), 2);
    /// // nir = 0.4, red = 0.05: 0.35 / 0.45 = 7/9 (by hand).
    /// assert!((e.eval_cell(&[0.4, 0.05]) - 7.0 / 9.0).abs() < 1e-12);
    /// # Ok::<(), terrastack::Error>(())
    /// ```
    pub fn parse(name: &str, text: &str) -> Result<Expression> {
        let valid_name = name.chars().next().is_some_and(|c| c.is_ascii_alphabetic())
            && name.chars().all(|c| c.is_ascii_alphanumeric() || c == '_');
        if !valid_name {
            return Err(Error::usage(format!(
                "`{name}` cannot name an expression layer: use letters, digits and `_`, starting with a letter"
            ))
            .with_fix("e.g. `wet_meadow = if ndwi_like > 0 then 1 else 0` becomes name `wet_meadow`"));
        }
        let chars = text.chars().count();
        if chars > MAX_EXPRESSION_CHARS {
            return Err(Error::usage(format!(
                "expression `{name}` is {chars} characters long, more than the limit of {MAX_EXPRESSION_CHARS}"
            ))
            .with_fix("split the formula into several --index layers"));
        }
        let tokens = tokenize(name, text)?;
        let mut p = Parser {
            name,
            text,
            tokens,
            pos: 0,
            program: Vec::new(),
            roles: Vec::new(),
            depth: 0,
        };
        if matches!(p.peek(), Tok::End) {
            return Err(p.err("the expression is empty"));
        }
        p.expression()?;
        if !matches!(p.peek(), Tok::End) {
            return Err(p.unexpected("an operator or the end of the expression"));
        }
        let depth = stack_depth(&p.program);
        Ok(Expression {
            name: name.to_string(),
            text: text.to_string(),
            roles: p.roles,
            program: p.program,
            depth,
        })
    }

    /// The layer's name.
    pub fn name(&self) -> &str {
        &self.name
    }

    /// The expression as the user wrote it.
    pub fn text(&self) -> &str {
        &self.text
    }

    /// Roles the expression reads, in order of first use.
    pub fn roles(&self) -> Vec<Role> {
        self.roles.clone()
    }

    /// Evaluate on one cell, `values` in [`Expression::roles`] order.
    pub fn eval_cell(&self, values: &[f64]) -> f64 {
        let columns: Vec<Vec<f32>> = values.iter().map(|v| vec![*v as f32]).collect();
        let mut stack: Vec<Vec<f64>> = vec![vec![0.0; 1]; self.depth.max(1)];
        let refs: Vec<&[f32]> = columns.iter().map(|c| c.as_slice()).collect();
        let mut out = [0.0f32];
        let mut exact = vec![0.0f64; 1];
        self.run(&refs, Some(values), &mut stack, &mut exact, &mut out);
        exact[0]
    }

    /// Evaluate over a block. Unitless unless the bands say otherwise; NaN where undefined
    /// or where a band read is NaN. Refuses with an error naming a role that is missing.
    pub fn eval(&self, bands: &BandArrays) -> Result<Array2<f32>> {
        let what = format!("expression `{}`", self.name);
        let arrays = self
            .roles
            .iter()
            .map(|r| {
                bands
                    .require(r, &what)
                    .map(|a| a.as_standard_layout().into_owned())
            })
            .collect::<Result<Vec<_>>>()?;
        let shape = match (arrays.first(), bands.shape()) {
            (Some(a), _) => a.dim(),
            (None, Some(s)) => s,
            (None, None) => {
                return Err(Error::usage(format!(
                    "{what} reads no band and there is no block to fill"
                )))
            }
        };
        let slices: Vec<&[f32]> = arrays
            .iter()
            .map(|a| a.as_slice().expect("standard layout"))
            .collect();
        let mut out = vec![0.0f32; shape.0 * shape.1];
        out.par_chunks_mut(RUN).enumerate().for_each_init(
            || {
                (
                    vec![vec![0.0f64; RUN]; self.depth.max(1)],
                    vec![0.0f64; RUN],
                )
            },
            |(stack, exact), (k, chunk)| {
                let start = k * RUN;
                let inputs: Vec<&[f32]> = slices
                    .iter()
                    .map(|s| &s[start..start + chunk.len()])
                    .collect();
                self.run(&inputs, None, stack, exact, chunk);
            },
        );
        Ok(Array2::from_shape_vec(shape, out).expect("shape matches length"))
    }

    /// Run the program over one run of cells. `exact_inputs` (one cell) bypasses the f32
    /// inputs so that `eval_cell` keeps full precision.
    fn run(
        &self,
        inputs: &[&[f32]],
        exact_inputs: Option<&[f64]>,
        stack: &mut [Vec<f64>],
        exact: &mut [f64],
        out: &mut [f32],
    ) {
        let n = out.len();
        let mut top = 0usize; // number of occupied stack slots
        for instr in &self.program {
            match instr {
                Instr::Const(v) => {
                    stack[top][..n].fill(*v);
                    top += 1;
                }
                Instr::Band(i) => {
                    match exact_inputs {
                        Some(vals) => stack[top][0] = vals[*i],
                        None => {
                            for (d, s) in stack[top][..n].iter_mut().zip(inputs[*i]) {
                                *d = *s as f64;
                            }
                        }
                    }
                    top += 1;
                }
                Instr::Neg => stack[top - 1][..n].iter_mut().for_each(|v| *v = -*v),
                Instr::Not => stack[top - 1][..n].iter_mut().for_each(|v| {
                    if !v.is_nan() {
                        *v = truth(*v == 0.0);
                    }
                }),
                Instr::Bin(op) => {
                    let (lo, hi) = stack.split_at_mut(top - 1);
                    let (a, b) = (&mut lo[top - 2], &hi[0]);
                    for (x, y) in a[..n].iter_mut().zip(&b[..n]) {
                        *x = binary(*op, *x, *y);
                    }
                    top -= 1;
                }
                Instr::Call(func, argc) => {
                    let base = top - argc;
                    let (lo, hi) = stack.split_at_mut(base + 1);
                    let dst = &mut lo[base];
                    match func {
                        Func::Min | Func::Max => {
                            for arg in &hi[..argc - 1] {
                                for (x, y) in dst[..n].iter_mut().zip(&arg[..n]) {
                                    *x = if x.is_nan() || y.is_nan() {
                                        f64::NAN
                                    } else if *func == Func::Min {
                                        x.min(*y)
                                    } else {
                                        x.max(*y)
                                    };
                                }
                            }
                        }
                        Func::Clamp => {
                            let (lo_v, hi_v) = (&hi[0], &hi[1]);
                            for i in 0..n {
                                let (x, a, b) = (dst[i], lo_v[i], hi_v[i]);
                                dst[i] = if x.is_nan() || a.is_nan() || b.is_nan() || a > b {
                                    f64::NAN
                                } else {
                                    x.clamp(a, b)
                                };
                            }
                        }
                        _ => dst[..n].iter_mut().for_each(|v| *v = unary(*func, *v)),
                    }
                    top = base + 1;
                }
                Instr::Select => {
                    let (lo, hi) = stack.split_at_mut(top - 2);
                    let cond = &mut lo[top - 3];
                    let (then_v, else_v) = (&hi[0], &hi[1]);
                    for i in 0..n {
                        let c = cond[i];
                        cond[i] = if c.is_nan() {
                            f64::NAN
                        } else if c != 0.0 {
                            then_v[i]
                        } else {
                            else_v[i]
                        };
                    }
                    top -= 2;
                }
            }
        }
        for i in 0..n {
            let v = defined(stack[0][i]);
            exact[i] = v;
            out[i] = v as f32;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::spectral::indices::find_index;
    use ndarray::array;

    fn eval1(text: &str, values: &[(&str, f64)]) -> f64 {
        let e = Expression::parse("t", text).unwrap();
        let vals: Vec<f64> = e
            .roles()
            .iter()
            .map(|r| values.iter().find(|(n, _)| *n == r.name()).unwrap().1)
            .collect();
        e.eval_cell(&vals)
    }

    #[test]
    fn precedence_and_associativity() {
        // Arithmetic by hand.
        assert_eq!(eval1("1 + 2 * 3", &[]), 7.0);
        assert_eq!(eval1("(1 + 2) * 3", &[]), 9.0);
        assert_eq!(eval1("2 ^ 3 ^ 2", &[]), 512.0);
        assert_eq!(eval1("-2 ^ 2", &[]), -4.0);
        assert_eq!(eval1("2 ^ -1", &[]), 0.5);
        assert_eq!(eval1("8 / 4 / 2", &[]), 1.0);
        assert_eq!(eval1("7 - 2 - 1", &[]), 4.0);
        assert_eq!(eval1("1e-4 * 2.5E+2 + .5", &[]), 0.525);
        assert_eq!(eval1("--3", &[]), 3.0);
    }

    #[test]
    fn comparisons_logic_and_conditional() {
        let v = [("nir", 0.4), ("red", 0.05)];
        assert_eq!(eval1("nir > 0.3 and red < 0.1", &v), 1.0);
        assert_eq!(eval1("nir > 0.5 or red >= 0.05", &v), 1.0);
        assert_eq!(eval1("not nir > 0.3", &v), 0.0);
        assert_eq!(eval1("if nir > 0.3 then 10 else 20", &v), 10.0);
        assert_eq!(
            eval1(
                "if nir <= 0.3 then 10 else if red == 0.05 then 2 else 3",
                &v
            ),
            2.0
        );
        assert_eq!(eval1("1 + (if red != 0 then 1 else 0)", &v), 2.0);
    }

    #[test]
    fn functions_worked_by_hand() {
        assert_eq!(eval1("min(3, -1, 2)", &[]), -1.0);
        assert_eq!(eval1("max(3, -1, 2)", &[]), 3.0);
        assert_eq!(eval1("abs(-2.5)", &[]), 2.5);
        assert_eq!(eval1("sqrt(16)", &[]), 4.0);
        assert_eq!(eval1("clamp(5, 0, 1)", &[]), 1.0);
        assert_eq!(eval1("clamp(-5, 0, 1)", &[]), 0.0);
        // ln(e) = 1 and exp(0) = 1 (closed form).
        assert!((eval1("ln(exp(1))", &[]) - 1.0).abs() < 1e-15);
        assert_eq!(eval1("exp(0)", &[]), 1.0);
    }

    #[test]
    fn undefined_results_are_nan() {
        for text in [
            "1 / 0",
            "0 / 0",
            "sqrt(-1)",
            "ln(0)",
            "ln(-2)",
            "0 ^ -1",
            "exp(1000)",
            "clamp(0.5, 1, 0)",
            "if 0 / 0 then 1 else 2",
            "min(1, 0/0)",
            "not (0/0)",
        ] {
            assert!(eval1(text, &[]).is_nan(), "{text}");
        }
    }

    #[test]
    fn ndvi_expression_matches_catalogue() {
        // The catalogue's ndvi (checked against docs/methods.md worked values) computed through
        // band math must agree to f32 rounding.
        let mut b = BandArrays::new();
        b.insert(Role::Nir, array![[0.40f32, 0.3, 0.0, f32::NAN]])
            .unwrap();
        b.insert(Role::Red, array![[0.05f32, 0.1, 0.0, 0.1]])
            .unwrap();
        let e = Expression::parse("my_ndvi", "(nir - red) / (nir + red)").unwrap();
        assert_eq!(e.roles(), vec![Role::Nir, Role::Red]);
        let got = e.eval(&b).unwrap();
        let want = find_index("ndvi").unwrap().compute(&b).unwrap();
        for (g, w) in got.iter().zip(want.iter()) {
            assert!(
                (g.is_nan() && w.is_nan()) || (g - w).abs() <= 1e-7,
                "{g} vs {w}"
            );
        }
        assert!((got[[0, 0]] as f64 - 7.0 / 9.0).abs() < 1e-6); // 0.35/0.45 by hand
    }

    #[test]
    fn large_block_spans_several_runs() {
        // 3 · RUN + 17 cells so the last run is partial; closed form 2·nir − 1.
        let n = 3 * RUN + 17;
        let nir = Array2::from_shape_fn((1, n), |(_, j)| j as f32 / n as f32);
        let mut b = BandArrays::new();
        b.insert(Role::Nir, nir.clone()).unwrap();
        let out = Expression::parse("t", "2*nir - 1")
            .unwrap()
            .eval(&b)
            .unwrap();
        for (o, x) in out.iter().zip(nir.iter()) {
            assert!((o - (2.0 * x - 1.0)).abs() < 1e-6);
        }
    }

    #[test]
    fn constant_expression_fills_block() {
        let mut b = BandArrays::new();
        b.insert(Role::Nir, Array2::zeros((2, 2))).unwrap();
        let out = Expression::parse("t", "0.5").unwrap().eval(&b).unwrap();
        assert_eq!(out, Array2::from_elem((2, 2), 0.5f32));
    }

    #[test]
    fn missing_role_named() {
        let mut b = BandArrays::new();
        b.insert(Role::Nir, array![[0.4f32]]).unwrap();
        let e = Expression::parse("ratio", "nir / swir1").unwrap();
        let msg = e.eval(&b).unwrap_err().to_string();
        assert!(
            msg.contains("`swir1`") && msg.contains("expression `ratio`"),
            "{msg}"
        );
    }

    #[test]
    fn syntax_errors_point_at_column() {
        let msg = Expression::parse("t", "(nir - red)) / 2")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("column 12"), "{msg}");
        assert!(
            msg.contains("\n    (nir - red)) / 2\n               ^"),
            "{msg}"
        );
        let msg = Expression::parse("t", "nir +").unwrap_err().to_string();
        assert!(
            msg.contains("column 6") && msg.contains("end of the expression"),
            "{msg}"
        );
        let msg = Expression::parse("t", "nir = red").unwrap_err().to_string();
        assert!(msg.contains("column 5") && msg.contains("=="), "{msg}");
        let msg = Expression::parse("t", "clamp(nir, 0)")
            .unwrap_err()
            .to_string();
        assert!(
            msg.contains("column 1") && msg.contains("three arguments"),
            "{msg}"
        );
        let msg = Expression::parse("t", "1 < nir < 2")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("do not chain"), "{msg}");
        let msg = Expression::parse("t", "nri * 2").unwrap_err().to_string();
        assert!(msg.contains("did you mean `nir`"), "{msg}");
        let msg = Expression::parse("t", "if nir then 1")
            .unwrap_err()
            .to_string();
        assert!(msg.contains("`else`"), "{msg}");
        let msg = Expression::parse("t", "nir $ 2").unwrap_err().to_string();
        assert!(msg.contains("column 5") && msg.contains("`$`"), "{msg}");
        assert!(Expression::parse("t", "   ").is_err());
        assert!(Expression::parse("2bad", "nir").is_err());
        assert!(Expression::parse("t", "sqrt nir").is_err());
    }

    #[test]
    fn nesting_and_length_are_bounded() {
        // 1,800 nested parentheses once overflowed the parser's stack: now a usage error.
        let deep = format!("{}nir{}", "(".repeat(1800), ")".repeat(1800));
        let e = Expression::parse("t", &deep).unwrap_err();
        assert_eq!(e.exit_code(), 2);
        assert!(e.to_string().contains("characters long"), "{e}");
        let deep = format!("{}nir{}", "(".repeat(900), ")".repeat(900));
        let msg = Expression::parse("t", &deep).unwrap_err().to_string();
        assert!(msg.contains("nests deeper than 64"), "{msg}");
        for text in [
            format!("{}nir", "-".repeat(200)),
            format!("{}nir", "not ".repeat(200)),
            format!("nir{}", "^2".repeat(200)),
            format!("{}nir{}", "abs(".repeat(200), ")".repeat(200)),
            format!("{}nir{}", "if 1 then ".repeat(100), " else 0".repeat(100)),
        ] {
            let msg = Expression::parse("t", &text).unwrap_err().to_string();
            assert!(msg.contains("nests deeper"), "{text}: {msg}");
        }
        // At the limit, an expression still parses and evaluates: 63 levels of parentheses
        // inside the one level the whole expression opens.
        let ok = format!(
            "{}nir{}",
            "(".repeat(MAX_NESTING - 1),
            ")".repeat(MAX_NESTING - 1)
        );
        assert_eq!(eval1(&ok, &[("nir", 0.5)]), 0.5);
        let too_deep = format!("({ok})");
        assert!(Expression::parse("t", &too_deep).is_err());
    }

    #[test]
    fn typographic_minus_accepted() {
        assert_eq!(eval1("3 − 1", &[]), 2.0);
    }
}
