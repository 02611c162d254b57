//! Edit distance with user costs: insertion, deletion and substitution costs per symbol,
//! read from a cost file and checked so that the result is a metric.
//!
//! # The cost file
//!
//! Plain text, one rule per line, fields separated by spaces or tabs. Blank lines and lines
//! starting with `#` are ignored.
//!
//! ```text
//! # waymark edit costs: nucleotide transitions are cheaper than transversions
//! indel * 1        # insert and delete cost of every symbol not named elsewhere
//! sub * * 1        # substitution cost between two different symbols not named elsewhere
//! sub A G 0.5      # sets both A→G and G→A
//! sub C T 0.5
//! indel N 0.25
//! ```
//!
//! | rule | meaning |
//! |---|---|
//! | `sub a b COST` | substituting `a` by `b`, and `b` by `a` |
//! | `sub * * COST` | substituting between two different symbols without a `sub` rule (default 1) |
//! | `ins a COST`, `del a COST` | inserting / deleting `a`; both must be given equal (see below) |
//! | `indel a COST` | inserting and deleting `a` |
//! | `ins * COST`, `del * COST`, `indel * COST` | the same for every symbol without its own rule (default 1) |
//!
//! A symbol is one character, or `U+` and its hexadecimal code point for characters that
//! the format cannot show (`U+0020` for a space, `U+002A` for a literal `*`, `U+0023` for `#`).
//! A cost is a decimal number. Substituting a symbol by itself always costs 0.
//!
//! # What is checked on load, and why
//!
//! The search's lower bounds need a metric. Every refusal names the file, the line and the
//! symbols.
//!
//! * Costs are finite and non-negative; `sub a a` can only be 0.
//! * Substitution costs are symmetric: `sub A G` and `sub G A` with different costs are
//!   refused. Insert and delete costs of one symbol are equal: inserting into one string is
//!   deleting from the other, so unequal costs make d(x, y) ≠ d(y, x).
//! * The costs obey the triangle inequality over the symbols *and the empty symbol*:
//!   `sub(a,c) ≤ sub(a,b) + sub(b,c)`, `sub(a,b) ≤ del(a) + ins(b)` and
//!   `del(a) ≤ sub(a,b) + del(b)`. The dynamic program minimises over *alignments*, where
//!   each character is edited at most once; it equals the cheapest *sequence* of edits — a
//!   shortest path in the graph of strings, hence a metric — exactly when the costs are a
//!   metric on symbols plus the empty symbol (Wagner and Fischer, "The string-to-string
//!   correction problem", JACM 21(1), 1974; from memory). Without it, e.g. with
//!   `sub A C 3` but `sub A G 1`, `sub G C 1`, the computed d(A, C) = 3 > d(A, G) + d(G, C).
//!
//! Zero costs are allowed and make a *pseudometric* (different strings at distance 0, e.g.
//! `sub a A 0` for case-blind matching); the lower bounds stay valid.
//!
//! Symbols without a rule all behave alike, so the triangle check runs over the named
//! symbols plus two stand-ins for "any other symbol" and the empty symbol: O(k³) for k named
//! symbols (a keyboard layout of ~100 keys checks in milliseconds).
//!
//! The table is serialisable (serde) so an index can store it; deserialising checks it again,
//! so a crafted index cannot smuggle in a table that breaks the metric.
//!
//! ```
//! use waymark::metric::{CostTable, Metric, PreparedQuery, WeightedEdit};
//!
//! let costs = CostTable::parse("sub A G 0.5\nsub C T 0.5\n", "dna.costs")?;
//! let m = WeightedEdit::new(costs);
//! assert_eq!(m.distance(b"GATTACA", b"GATTGCA"), 0.5);
//! assert_eq!(m.distance(b"GATTACA", b"GATACA"), 1.0);
//! assert_eq!(m.prepare(b"GATTACA").distance_within(b"CATTACA", 0.9), None);
//!
//! let err = CostTable::parse("sub A G 1\nsub G C 1\nsub A C 3\n", "bad.costs").unwrap_err();
//! assert!(err.to_string().starts_with("bad.costs:3: sub A C 3 exceeds"));
//! # Ok::<(), waymark::metric::MetricError>(())
//! ```

use std::collections::BTreeMap;
use std::path::Path;

use bstr::ByteSlice;
use serde::{Deserialize, Serialize};

use super::{Metric, MetricError, MetricKind, PreparedQuery};

/// Relative slack of the triangle check, for costs written in decimal.
const SLACK: f64 = 1e-9;

/// Insert/delete and substitution costs per symbol, checked to give a metric.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
#[serde(try_from = "CostRules", into = "CostRules")]
pub struct CostTable {
    rules: CostRules,
    /// Named symbols, sorted; index `k = symbols.len()` stands for every other symbol.
    symbols: Vec<char>,
    /// Insert (= delete) cost per named symbol, then the default.
    indel: Vec<f64>,
    /// `(k + 1) × (k + 1)` substitution costs between different symbols; entry `[k][k]` is
    /// the cost between two different unnamed symbols.
    sub: Vec<f64>,
}

/// The explicit rules of a cost table: the serialised form.
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct CostRules {
    /// Insert and delete cost of symbols without a rule.
    pub default_indel: f64,
    /// Substitution cost between different symbols without a rule.
    pub default_sub: f64,
    /// Insert and delete cost per symbol.
    pub indel: BTreeMap<char, f64>,
    /// Substitution cost per unordered pair, stored with the smaller char first.
    pub sub: Vec<(char, char, f64)>,
}

/// Where a cost came from, for error messages.
#[derive(Clone, Copy, Debug)]
enum Origin {
    Line(u64),
    Default,
}

impl Origin {
    fn describe(self) -> String {
        match self {
            Origin::Line(l) => format!("line {l}"),
            Origin::Default => "default".into(),
        }
    }
}

/// A rule violation found while building a table; `line` is the line to blame.
struct Violation {
    line: Option<u64>,
    message: String,
}

impl TryFrom<CostRules> for CostTable {
    type Error = String;

    fn try_from(rules: CostRules) -> Result<Self, String> {
        let indel = rules
            .indel
            .iter()
            .map(|(&c, &v)| (c, (v, Origin::Default)))
            .collect();
        let sub = rules
            .sub
            .iter()
            .map(|&(a, b, v)| ((a.min(b), a.max(b)), (v, Origin::Default)))
            .collect();
        build(
            (rules.default_indel, Origin::Default),
            (rules.default_sub, Origin::Default),
            indel,
            sub,
        )
        .map_err(|v| format!("invalid cost table: {}", v.message))
    }
}

impl From<CostTable> for CostRules {
    fn from(t: CostTable) -> CostRules {
        t.rules
    }
}

impl Default for CostTable {
    /// Unit costs (plain Levenshtein distance).
    fn default() -> Self {
        CostTable::parse("", "").expect("unit costs are a metric")
    }
}

impl CostTable {
    /// Reads a cost file. A line that ends with a carriage return and no line feed (old
    /// Mac line ends) and invalid UTF-8 are refused, naming the file and line (and the
    /// CR's byte); CRLF line ends are read.
    pub fn from_path(path: &Path) -> Result<CostTable, MetricError> {
        let name = path.display().to_string();
        let bytes = std::fs::read(path).map_err(|error| MetricError::Io {
            source_name: name.clone(),
            error,
        })?;
        CostTable::parse(&super::side_file_text(bytes, &name)?, &name)
    }

    /// Parses the text of a cost file; `source_name` is used in errors.
    pub fn parse(text: &str, source_name: &str) -> Result<CostTable, MetricError> {
        let err = |line: u64, message: String| MetricError::Line {
            source_name: source_name.to_string(),
            line,
            message,
        };
        let mut default_ins: Option<(f64, u64)> = None;
        let mut default_del: Option<(f64, u64)> = None;
        let mut default_sub: Option<(f64, u64)> = None;
        let mut ins: BTreeMap<char, (f64, u64)> = BTreeMap::new();
        let mut del: BTreeMap<char, (f64, u64)> = BTreeMap::new();
        let mut sub: BTreeMap<(char, char), (f64, Origin)> = BTreeMap::new();

        let text = text.strip_prefix('\u{FEFF}').unwrap_or(text);
        for (i, raw) in text.lines().enumerate() {
            let line = i as u64 + 1;
            let t = raw.trim();
            if t.is_empty() || t.starts_with('#') {
                continue;
            }
            let fields: Vec<&str> = t.split_whitespace().collect();
            let rule = fields[0];
            let want = if rule == "sub" { 4 } else { 3 };
            if !matches!(rule, "sub" | "ins" | "del" | "indel") {
                return Err(err(
                    line,
                    format!("unknown rule `{rule}` (expected sub, ins, del or indel)"),
                ));
            }
            if fields.len() != want {
                let usage = if rule == "sub" {
                    "sub SYMBOL SYMBOL COST"
                } else {
                    "ins|del|indel SYMBOL COST"
                };
                return Err(err(
                    line,
                    format!("expected `{usage}`, found {} fields", fields.len()),
                ));
            }
            let cost_text = fields[want - 1];
            let cost: f64 = cost_text
                .parse()
                .map_err(|_| err(line, format!("cost `{cost_text}` is not a number")))?;
            if !cost.is_finite() || cost < 0.0 {
                return Err(err(
                    line,
                    format!("cost {cost_text} must be finite and non-negative"),
                ));
            }
            let sym = |s: &str| parse_symbol(s).map_err(|m| err(line, m));
            // Records a cost, refusing a second rule with another value.
            let set = |map: &mut BTreeMap<char, (f64, u64)>,
                       dflt: &mut Option<(f64, u64)>,
                       what: &str,
                       s: Option<char>|
             -> Result<(), MetricError> {
                let slot = match s {
                    Some(c) => map.get(&c).copied(),
                    None => *dflt,
                };
                if let Some((old, at)) = slot {
                    if old != cost {
                        return Err(err(
                            line,
                            format!(
                                "{what} cost of {} is {cost_text} here but {old} at line {at}",
                                show(s)
                            ),
                        ));
                    }
                }
                match s {
                    Some(c) => {
                        map.insert(c, (cost, line));
                    }
                    None => *dflt = Some((cost, line)),
                }
                Ok(())
            };
            match rule {
                "ins" => set(&mut ins, &mut default_ins, "insert", sym(fields[1])?)?,
                "del" => set(&mut del, &mut default_del, "delete", sym(fields[1])?)?,
                "indel" => {
                    let s = sym(fields[1])?;
                    set(&mut ins, &mut default_ins, "insert", s)?;
                    set(&mut del, &mut default_del, "delete", s)?;
                }
                _ => {
                    let (a, b) = (sym(fields[1])?, sym(fields[2])?);
                    match (a, b) {
                        (None, None) => {
                            if let Some((old, at)) = default_sub {
                                if old != cost {
                                    return Err(err(line, format!("default substitution cost is {cost_text} here but {old} at line {at}")));
                                }
                            }
                            default_sub = Some((cost, line));
                        }
                        (Some(a), Some(b)) if a == b => {
                            if cost != 0.0 {
                                return Err(err(
                                    line,
                                    format!(
                                        "substituting {} by itself must cost 0, not {cost_text}",
                                        show(Some(a))
                                    ),
                                ));
                            }
                        }
                        (Some(a), Some(b)) => {
                            let key = (a.min(b), a.max(b));
                            if let Some(&(old, Origin::Line(at))) = sub.get(&key) {
                                if old != cost {
                                    return Err(err(line, format!(
                                        "substitution costs must be symmetric: sub {} {} {cost_text} here, but line {at} gives {old} for the same pair",
                                        show(Some(a)), show(Some(b))
                                    )));
                                }
                            }
                            sub.insert(key, (cost, Origin::Line(line)));
                        }
                        _ => {
                            return Err(err(
                                line,
                                "a wildcard substitution must be `sub * * COST`".into(),
                            ))
                        }
                    }
                }
            }
        }

        // Insert and delete costs must agree per symbol (and for the defaults).
        let resolve = |m: &BTreeMap<char, (f64, u64)>, d: Option<(f64, u64)>, c: char| {
            m.get(&c)
                .map(|&(v, l)| (v, Origin::Line(l)))
                .or(d.map(|(v, l)| (v, Origin::Line(l))))
                .unwrap_or((1.0, Origin::Default))
        };
        let dflt = |d: Option<(f64, u64)>| {
            d.map(|(v, l)| (v, Origin::Line(l)))
                .unwrap_or((1.0, Origin::Default))
        };
        let (di, dd) = (dflt(default_ins), dflt(default_del));
        let mismatch = |c: Option<char>, i: (f64, Origin), d: (f64, Origin)| {
            let line = match (i.1, d.1) {
                (Origin::Line(a), Origin::Line(b)) => a.max(b),
                (Origin::Line(a), _) | (_, Origin::Line(a)) => a,
                _ => 0,
            };
            err(
                line,
                format!(
                    "insert cost of {} is {} ({}) but its delete cost is {} ({}): they must be \
                     equal, since inserting into one string is deleting from the other",
                    show(c),
                    i.0,
                    i.1.describe(),
                    d.0,
                    d.1.describe()
                ),
            )
        };
        if di.0 != dd.0 {
            return Err(mismatch(None, di, dd));
        }
        let mut indel: BTreeMap<char, (f64, Origin)> = BTreeMap::new();
        for &c in ins.keys().chain(del.keys()) {
            let (i, d) = (resolve(&ins, default_ins, c), resolve(&del, default_del, c));
            if i.0 != d.0 {
                return Err(mismatch(Some(c), i, d));
            }
            let origin = if ins.contains_key(&c) { i.1 } else { d.1 };
            indel.insert(c, (i.0, origin));
        }
        build(di, dflt(default_sub), indel, sub).map_err(|v| match v.line {
            Some(line) => err(line, v.message),
            None => MetricError::Options(format!("{source_name}: {}", v.message)),
        })
    }

    /// The insert (= delete) cost of `c`.
    pub fn indel(&self, c: char) -> f64 {
        self.indel[self.index(c)]
    }

    /// The cost of substituting `a` by `b` (0 when equal).
    pub fn sub(&self, a: char, b: char) -> f64 {
        if a == b {
            0.0
        } else {
            self.sub[self.index(a) * (self.symbols.len() + 1) + self.index(b)]
        }
    }

    /// The explicit rules (what is serialised).
    pub fn rules(&self) -> &CostRules {
        &self.rules
    }

    fn index(&self, c: char) -> usize {
        self.symbols.binary_search(&c).unwrap_or(self.symbols.len())
    }
}

/// `Some(char)` for a symbol, `None` for `*`.
fn parse_symbol(s: &str) -> Result<Option<char>, String> {
    if s == "*" {
        return Ok(None);
    }
    let mut chars = s.chars();
    if let (Some(c), None) = (chars.next(), chars.next()) {
        return Ok(Some(c));
    }
    if let Some(hex) = s.strip_prefix("U+").or_else(|| s.strip_prefix("u+")) {
        if let Some(c) = u32::from_str_radix(hex, 16).ok().and_then(char::from_u32) {
            return Ok(Some(c));
        }
    }
    Err(format!(
        "symbol `{s}` must be one character, `*`, or U+ and a hexadecimal code point"
    ))
}

/// How a symbol is shown in messages.
fn show(c: Option<char>) -> String {
    match c {
        None => "*".into(),
        Some(c) if c.is_whitespace() || c.is_control() || c == '*' || c == '#' => {
            format!("U+{:04X}", c as u32)
        }
        Some(c) => c.to_string(),
    }
}

/// Builds the dense table and runs the metric checks.
fn build(
    default_indel: (f64, Origin),
    default_sub: (f64, Origin),
    indel: BTreeMap<char, (f64, Origin)>,
    sub: BTreeMap<(char, char), (f64, Origin)>,
) -> Result<CostTable, Violation> {
    let bad = |v: f64| !v.is_finite() || v < 0.0;
    if bad(default_indel.0)
        || bad(default_sub.0)
        || indel.values().chain(sub.values()).any(|v| bad(v.0))
    {
        return Err(Violation {
            line: None,
            message: "costs must be finite and non-negative".into(),
        });
    }
    if sub.keys().any(|&(a, b)| a >= b) {
        return Err(Violation {
            line: None,
            message: "substitution pairs must be two different symbols".into(),
        });
    }
    let mut symbols: Vec<char> = indel.keys().copied().collect();
    symbols.extend(sub.keys().flat_map(|&(a, b)| [a, b]));
    symbols.sort_unstable();
    symbols.dedup();
    let k = symbols.len();
    let at = |c: char| symbols.binary_search(&c).expect("named symbol");

    // Points of the check: named symbols 0..k, two stand-ins k and k+1 for "other symbols"
    // (different from each other), and the empty symbol k+2.
    let p = k + 3;
    let (o2, empty) = (k + 1, k + 2);
    let mut cost = vec![(default_sub.0, default_sub.1); p * p];
    for x in 0..p {
        cost[x * p + x] = (0.0, Origin::Default);
    }
    let mut set = |x: usize, y: usize, v: (f64, Origin)| {
        cost[x * p + y] = v;
        cost[y * p + x] = v;
    };
    for (x, c) in symbols.iter().enumerate() {
        set(x, empty, indel.get(c).copied().unwrap_or(default_indel));
    }
    set(k, empty, default_indel);
    set(o2, empty, default_indel);
    for (&(a, b), &v) in &sub {
        set(at(a), at(b), v);
    }
    let name = |x: usize| -> String {
        if x < k {
            show(Some(symbols[x]))
        } else {
            "(any other symbol)".into()
        }
    };
    let rule = |x: usize, y: usize| -> String {
        let v = cost[x * p + y];
        if x == empty {
            format!("ins {} {}", name(y), v.0)
        } else if y == empty {
            format!("del {} {}", name(x), v.0)
        } else {
            format!("sub {} {} {}", name(x), name(y), v.0)
        }
    };
    let describe = |x: usize, y: usize| -> String {
        let text = rule(x, y);
        match cost[x * p + y].1 {
            Origin::Line(l) => format!("{text} (line {l})"),
            Origin::Default => format!("{text} (default)"),
        }
    };
    for x in 0..p {
        for z in 0..p {
            if x == z || (x == empty && z < empty) {
                // ins(z) ≤ … is del(z) ≤ … by symmetry.
                continue;
            }
            let direct = cost[x * p + z].0;
            for y in 0..p {
                if y == x || y == z {
                    continue;
                }
                let via = cost[x * p + y].0 + cost[y * p + z].0;
                if direct > via + SLACK * via.max(1.0) {
                    let (xs, zs) = (x, z);
                    let line = match cost[xs * p + zs].1 {
                        Origin::Line(l) => Some(l),
                        Origin::Default => [cost[xs * p + y].1, cost[y * p + zs].1]
                            .iter()
                            .filter_map(|o| match o {
                                Origin::Line(l) => Some(*l),
                                Origin::Default => None,
                            })
                            .max(),
                    };
                    let head = rule(xs, zs);
                    return Err(Violation {
                        line,
                        message: format!(
                            "{head} exceeds {} + {} = {via}: costs must obey the triangle \
                             inequality (over symbols and the empty symbol) for the distance \
                             to be a metric",
                            describe(xs, y),
                            describe(y, zs),
                        ),
                    });
                }
            }
        }
    }

    let mut indel_v: Vec<f64> = symbols
        .iter()
        .map(|c| indel.get(c).map_or(default_indel.0, |v| v.0))
        .collect();
    indel_v.push(default_indel.0);
    let mut sub_v = vec![default_sub.0; (k + 1) * (k + 1)];
    for x in 0..k {
        sub_v[x * (k + 1) + x] = 0.0;
    }
    for (&(a, b), &(v, _)) in &sub {
        let (x, y) = (at(a), at(b));
        sub_v[x * (k + 1) + y] = v;
        sub_v[y * (k + 1) + x] = v;
    }
    let rules = CostRules {
        default_indel: default_indel.0,
        default_sub: default_sub.0,
        indel: indel.iter().map(|(&c, &(v, _))| (c, v)).collect(),
        sub: sub.iter().map(|(&(a, b), &(v, _))| (a, b, v)).collect(),
    };
    Ok(CostTable {
        rules,
        symbols,
        indel: indel_v,
        sub: sub_v,
    })
}

/// Edit distance with the costs of a [`CostTable`].
#[derive(Clone, Debug, PartialEq)]
pub struct WeightedEdit {
    costs: std::sync::Arc<CostTable>,
    /// [`WeightedEdit::smallest_costs`], found once.
    smallest: (f64, f64),
}

impl WeightedEdit {
    /// The metric of a checked cost table.
    pub fn new(costs: CostTable) -> Self {
        let smallest = smallest_costs(&costs);
        WeightedEdit {
            costs: std::sync::Arc::new(costs),
            smallest,
        }
    }

    /// Reads and checks a cost file.
    pub fn from_path(path: &Path) -> Result<Self, MetricError> {
        CostTable::from_path(path).map(WeightedEdit::new)
    }

    /// The cost table.
    pub fn costs(&self) -> &CostTable {
        &self.costs
    }
}

/// A query prepared for [`WeightedEdit`]: its characters, their symbol numbers and their
/// insert costs, looked up once.
#[derive(Clone, Debug)]
pub struct WeightedQuery {
    costs: std::sync::Arc<CostTable>,
    chars: Vec<char>,
    index: Vec<usize>,
    indel: Vec<f64>,
}

impl Metric for WeightedEdit {
    type Prepared = WeightedQuery;

    fn kind(&self) -> MetricKind {
        MetricKind::WeightedEdit
    }

    fn prepare(&self, query: &[u8]) -> WeightedQuery {
        let chars: Vec<char> = query.chars().collect();
        let index: Vec<usize> = chars.iter().map(|&c| self.costs.index(c)).collect();
        let indel = index.iter().map(|&i| self.costs.indel[i]).collect();
        WeightedQuery {
            costs: self.costs.clone(),
            chars,
            index,
            indel,
        }
    }
}

impl WeightedQuery {
    /// The distance if at most `bound` (stops at the first row whose minimum exceeds it).
    fn run(&self, item: &[u8], bound: f64) -> Option<f64> {
        let t = &*self.costs;
        let w = t.symbols.len() + 1;
        let m = self.chars.len();
        let mut prev = Vec::with_capacity(m + 1);
        prev.push(0.0);
        for j in 0..m {
            prev.push(prev[j] + self.indel[j]);
        }
        let mut cur = vec![0.0; m + 1];
        for c in item.chars() {
            let ci = t.index(c);
            let del = t.indel[ci];
            let row = &t.sub[ci * w..(ci + 1) * w];
            cur[0] = prev[0] + del;
            let mut row_min = cur[0];
            for j in 0..m {
                let s = if self.chars[j] == c {
                    0.0
                } else {
                    row[self.index[j]]
                };
                let v = (prev[j] + s)
                    .min(prev[j + 1] + del)
                    .min(cur[j] + self.indel[j]);
                cur[j + 1] = v;
                row_min = row_min.min(v);
            }
            if row_min > bound {
                return None;
            }
            std::mem::swap(&mut prev, &mut cur);
        }
        let d = prev[m];
        (d <= bound).then_some(d)
    }
}

impl PreparedQuery for WeightedQuery {
    fn distance(&self, item: &[u8]) -> f64 {
        self.run(item, f64::INFINITY).unwrap_or(f64::INFINITY)
    }

    fn distance_within(&self, item: &[u8], bound: f64) -> Option<f64> {
        if bound.is_nan() || bound < 0.0 {
            return None;
        }
        self.run(item, bound)
    }
}

/// Numbers per item of [`WeightedEdit::sketch`]: the length in chars, 16 char counts and a
/// char signature in two halves.
pub const WEIGHTED_SKETCH: usize = 1 + COUNT_BINS + 2;

/// Bins of the char counts in [`WeightedEdit::sketch`].
const COUNT_BINS: usize = 16;

impl WeightedEdit {
    /// The smallest insert (= delete) cost and the smallest cost of substituting one
    /// symbol by a different one (of any rule, the defaults included).
    pub fn smallest_costs(&self) -> (f64, f64) {
        self.smallest
    }

    /// The sketch of `item` for [`WeightedEdit::sketch_bound`]: its length in chars, how
    /// many of its chars fall in each of 16 bins (ASCII `c` in bin `c mod 15`, every other
    /// char in bin 15), and its char signature ([`super::LevenshteinQuery::signature`]) in
    /// two halves.
    pub fn sketch(item: &[u8], out: &mut [f64]) {
        let mut counts = [0u64; COUNT_BINS];
        let mut len = 0u64;
        for c in item.chars() {
            let bin = if c.is_ascii() { c as usize % 15 } else { 15 };
            counts[bin] += 1;
            len += 1;
        }
        out[0] = len as f64;
        for (o, &n) in out[1..=COUNT_BINS].iter_mut().zip(&counts) {
            *o = n as f64;
        }
        let sig = super::LevenshteinQuery::signature(item);
        out[COUNT_BINS + 1] = f64::from(sig as u32);
        out[COUNT_BINS + 2] = f64::from((sig >> 32) as u32);
    }

    /// A lower bound of the distance of two items from their [`WeightedEdit::sketch`]es:
    /// with `L` the difference of lengths and `G` the larger of the char-count gap
    /// (`max(Σ(A−B)⁺, Σ(B−A)⁺)` over the bins) and the signature gap,
    /// `L·indel + (G − L)·min(indel, sub)` with the smallest costs
    /// ([`WeightedEdit::smallest_costs`]).
    ///
    /// Proof: an optimal alignment makes `i` insertions or deletions and `s` substitutions
    /// of different symbols; `i ≥ L` (each changes the length by one) and `i + s ≥ G` (each
    /// edit changes each one-sided count sum, and each side of the signature gap, by at
    /// most one), so its cost `i·indel + s·sub` is at least the bound. Shrunk by the
    /// rounding of a sum of at most `|a| + |b|` costs.
    pub fn sketch_bound(&self, a: &[f64], b: &[f64]) -> f64 {
        let (indel, sub) = self.smallest_costs();
        let len_gap = (a[0] - b[0]).abs();
        let (mut up, mut down) = (0.0, 0.0);
        for (x, y) in a[1..=COUNT_BINS].iter().zip(&b[1..=COUNT_BINS]) {
            up += (x - y).max(0.0);
            down += (y - x).max(0.0);
        }
        let sig = |s: &[f64]| (s[COUNT_BINS + 1] as u64) | ((s[COUNT_BINS + 2] as u64) << 32);
        let sig_gap = f64::from(super::LevenshteinQuery::signature_gap(sig(a), sig(b)));
        let g = f64::max(up, down).max(sig_gap);
        let bound = len_gap * indel + (g - len_gap).max(0.0) * indel.min(sub);
        let terms = a[0] + b[0] + 2.0;
        (bound * (1.0 - terms * f64::EPSILON)).max(0.0)
    }
}

/// [`WeightedEdit::smallest_costs`] of a table.
fn smallest_costs(t: &CostTable) -> (f64, f64) {
    let w = t.symbols.len() + 1;
    let indel = t.indel.iter().copied().fold(f64::INFINITY, f64::min);
    // Entry (i, i) of a named symbol is a symbol against itself, never a substitution;
    // (k, k) is two different symbols without a rule.
    let sub = (0..w * w)
        .filter(|&e| e / w != e % w || e / w == w - 1)
        .map(|e| t.sub[e])
        .fold(f64::INFINITY, f64::min);
    (indel, sub)
}
