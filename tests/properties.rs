//! Property-based tests (proptest) of the three layers every book goes
//! through: the record reader, the number parser and the row validator.
//!
//! Each property compares saltus with an independent reference:
//! - the record reader ([`RecordReader`]) with the `csv` crate's reader
//!   (`has_headers(false)`, `flexible(true)`), field by field, on texts
//!   biased toward the bytes that make CSV hard (commas, quotes, CR, LF,
//!   CRLF, byte-order marks, empty and long fields, non-UTF-8 bytes), with
//!   the two departures README documents (all-empty records skipped, a
//!   quote left open cutting its record at its line) modelled as the fuzz
//!   oracle models them; its line numbers with a count of line breaks
//!   (`\n`, `\r\n` or a lone `\r`, each one break); and small read sizes
//!   with large ones;
//! - the number parser (the fast decimal path and its fast-float2 fallback,
//!   reached through [`parse_row`]) with `str::parse::<f64>`, bit for bit;
//! - the row validator ([`parse_row`], [`Contract::new`]) with the domain
//!   documented in README.md and `src/model.rs`: rows inside it parse to
//!   exactly the values written, rows with one field spoiled are refused
//!   with an error naming that column and the line, never a panic.
//!
//! Runs are reproducible: the generator seed is fixed (override with
//! `PROPTEST_RNG_SEED`, the case count with `PROPTEST_CASES`), and no
//! failure file is written; a failure prints the shrunk input, which then
//! belongs in a named regression test.

use proptest::collection::vec;
use proptest::prelude::*;
use proptest::test_runner::{Config, RngSeed};
use saltus::book::records::{Record, RecordReader};
use saltus::book::{parse_row, Schema};
use saltus::model::{Contract, JumpParams, OptionKind};

/// The seed used unless `PROPTEST_RNG_SEED` is set.
const SEED: u64 = 0x5a17_05f0_0d5e_ed08;
const BOM: &[u8] = b"\xef\xbb\xbf";

fn config(cases: u32) -> Config {
    let mut c = Config::default();
    if std::env::var_os("PROPTEST_CASES").is_none() {
        c.cases = cases;
    }
    if std::env::var_os("PROPTEST_RNG_SEED").is_none() {
        c.rng_seed = RngSeed::Fixed(SEED);
    }
    c.failure_persistence = None;
    c
}

/// Bytes shown escaped in failure reports.
#[derive(Clone, PartialEq)]
struct Text(Vec<u8>);

impl std::fmt::Debug for Text {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "b\"{}\"", self.0.escape_ascii())
    }
}

// ---------------------------------------------------------------- reader --

fn piece() -> impl Strategy<Value = Vec<u8>> {
    prop_oneof![
        6 => Just(b",".to_vec()),
        4 => Just(b"\"".to_vec()),
        1 => Just(b"\"\"".to_vec()),
        3 => Just(b"\r".to_vec()),
        4 => Just(b"\n".to_vec()),
        3 => Just(b"\r\n".to_vec()),
        1 => Just(BOM.to_vec()),
        8 => vec(prop::sample::select(b"ab01 .-e".to_vec()), 1..5),
        1 => (1usize..3000).prop_map(|n| vec![b'x'; n]),
        2 => (0x80u8..=0xff).prop_map(|b| vec![b]),
        1 => any::<u8>().prop_map(|b| vec![b]),
    ]
}

fn csv_text() -> impl Strategy<Value = Text> {
    (any::<bool>(), vec(piece(), 0..60)).prop_map(|(bom, pieces)| {
        let mut t = if bom { BOM.to_vec() } else { Vec::new() };
        t.extend(pieces.concat());
        Text(t)
    })
}

/// Records as the contract reads them, with the line each starts on: the
/// model of the fuzz oracle ([`crate::fuzz_cli::input_records`]: the `csv`
/// crate's records, a quote left open at the end cutting its record at the
/// end of its line, lines counting `\n`, `\r\n` and a lone `\r` as one
/// break each), without the records the reader skips (all fields empty and
/// no quote left open).
fn reference(text: &[u8]) -> Records {
    crate::fuzz_cli::input_records(text)
        .into_iter()
        .filter(|r| !r.skipped())
        .map(|r| (r.fields, r.line))
        .collect()
}

/// Records (fields and line) in reading order.
type Records = Vec<(Vec<Vec<u8>>, u64)>;

/// Records read by saltus with a given read size.
fn ours(text: &[u8], read_size: usize) -> Result<Records, TestCaseError> {
    let mut r = RecordReader::with_read_size(text, read_size);
    let mut rec = Record::default();
    let mut out = Vec::new();
    while let Some(line) = r.read_record(&mut rec).expect("reading memory cannot fail") {
        let fields: Vec<Vec<u8>> = rec.iter().map(<[u8]>::to_vec).collect();
        // The pipeline echoes a plain record by copying its raw line.
        if let Some(raw) = rec.plain_line() {
            prop_assert_eq!(Text(raw.to_vec()), Text(fields.join(&b',')));
        }
        out.push((fields, line));
    }
    Ok(out)
}

fn fields_only(v: &[(Vec<Vec<u8>>, u64)]) -> Vec<Vec<Text>> {
    v.iter()
        .map(|(f, _)| f.iter().map(|x| Text(x.clone())).collect())
        .collect()
}

fn lines_only(v: &[(Vec<Vec<u8>>, u64)]) -> Vec<u64> {
    v.iter().map(|(_, l)| *l).collect()
}

proptest! {
    #![proptest_config(config(3000))]

    /// Same fields as the `csv` crate, record by record (reference: the
    /// `csv` crate, whose state machine README says saltus follows).
    #[test]
    fn reader_agrees_with_the_csv_crate(text in csv_text(), small in 1usize..17) {
        let want = reference(&text.0);
        for size in [small, 1 << 20] {
            let got = ours(&text.0, size)?;
            prop_assert_eq!(fields_only(&got), fields_only(&want), "read size {}", size);
        }
    }

    /// Each record's line is 1 + the line breaks before its first byte
    /// (reference: the count above, `\r\n` one break, a lone `\r` one break).
    #[test]
    fn reader_line_numbers_count_line_breaks(text in csv_text(), small in 1usize..17) {
        let want = reference(&text.0);
        let got = ours(&text.0, small)?;
        prop_assert_eq!(fields_only(&got), fields_only(&want));
        prop_assert_eq!(lines_only(&got), lines_only(&want));
    }

    /// The read size never changes the records or their lines.
    #[test]
    fn reader_read_size_does_not_matter(text in csv_text(), small in 1usize..17) {
        let a = ours(&text.0, small)?;
        let b = ours(&text.0, 1 << 20)?;
        prop_assert_eq!(fields_only(&a), fields_only(&b));
        prop_assert_eq!(lines_only(&a), lines_only(&b));
    }
}

// ---------------------------------------------------------------- numbers --

/// A header with every column, in schema order (rate is field 4, quantity 12).
const ALL: [&str; 16] = saltus::book::schema::COLUMNS;
const VALID: [&str; 16] = [
    "call",
    "100",
    "95",
    "0.5",
    "0.03",
    "0.2",
    "0.5",
    "-0.1",
    "0.15",
    "x1",
    "U",
    "0.01",
    "2",
    "10",
    "2026-12-01",
    "american",
];

fn schema_of(names: &[impl AsRef<[u8]>]) -> Schema {
    let h: csv::ByteRecord = names.iter().map(AsRef::as_ref).collect();
    Schema::from_headers(&h).expect("a complete header")
}

fn digits(max: usize) -> impl Strategy<Value = String> {
    vec(prop::sample::select(b"0123456789".to_vec()), 0..max)
        .prop_map(|d| String::from_utf8(d).expect("ASCII"))
}

/// `[sign] digits [. digits] [exponent]`, any part possibly empty.
fn general_decimal() -> impl Strategy<Value = String> {
    let sign = prop::sample::select(vec!["", "", "-", "+"]);
    let exponent = prop_oneof![
        3 => Just(String::new()),
        1 => (prop::sample::select(vec!["e", "E"]), prop::sample::select(vec!["", "-", "+"]), 0u32..400)
            .prop_map(|(e, s, n)| format!("{e}{s}{n}")),
    ];
    (sign, digits(25), any::<bool>(), digits(30), exponent).prop_map(|(s, i, point, f, e)| {
        if point {
            format!("{s}{i}.{f}{e}")
        } else {
            format!("{s}{i}{f}{e}")
        }
    })
}

/// Decimal texts: plain decimals, exponents, signs, long mantissas, many
/// decimals, values near 2^53 and 10^22, overflow and underflow, junk.
fn decimal_text() -> impl Strategy<Value = String> {
    let sign = prop::sample::select(vec!["", "", "-", "+"]);
    let general = general_decimal();
    // Around the fast path's limits: mantissas near 2^53 = 9007199254740992
    // and exactly 22 or 23 decimals.
    let near_2_53 = (
        sign.clone(),
        9_007_199_254_740_980u64..9_007_199_254_741_010,
        0usize..25,
    )
        .prop_map(|(s, m, f)| {
            let d = m.to_string();
            if f == 0 || f >= d.len() {
                format!("{s}{d}")
            } else {
                format!("{s}{}.{}", &d[..d.len() - f], &d[d.len() - f..])
            }
        });
    let many_decimals =
        (sign.clone(), digits(4), 20usize..25, any::<u64>()).prop_map(|(s, i, n, x)| {
            let frac: String = format!("{x:020}{x:020}").chars().take(n).collect();
            let i = if i.is_empty() { "0".to_string() } else { i };
            format!("{s}{i}.{frac}")
        });
    let special = prop::sample::select(vec![
        "0",
        "-0",
        "0.0",
        "1e308",
        "1.7976931348623157e308",
        "1.7976931348623159e308",
        "1e309",
        "5e-324",
        "2.4703282292062327e-324",
        "2.4703282292062328e-324",
        "1e-400",
        "1e-320",
        "2.2250738585072014e-308",
        "2.2250738585072011e-308",
        "9007199254740993",
        "9007199254740992",
        "0.1",
        "0.30000000000000004",
        "1e22",
        "1e23",
        "inf",
        "-inf",
        "Infinity",
        "NaN",
        "nan",
        "-nan",
        "1.",
        ".5",
        ".",
        "",
        "-",
        "+",
        "e5",
        "1e",
        "1e+",
        "--1",
        "+-1",
        "1.2.3",
        "0x10",
        "1_000",
        "32%",
        "1,000",
        "١",
        "1 2",
        "1e5.5",
    ])
    .prop_map(String::from);
    let junk = (
        general_decimal(),
        any::<prop::sample::Index>(),
        prop::sample::select(b"0.eE+-xni a%".to_vec()),
    )
        .prop_map(|(s, at, c)| {
            let mut b = s.into_bytes();
            let i = at.index(b.len() + 1);
            b.insert(i, c);
            String::from_utf8(b).expect("ASCII")
        });
    prop_oneof![6 => general, 2 => near_2_53, 2 => many_decimals, 2 => special, 2 => junk]
}

proptest! {
    #![proptest_config(config(20_000))]

    /// A number field reads as `str::parse::<f64>` reads it, bit for bit, and
    /// is refused (naming the column) when `str::parse` refuses it or gives
    /// a non-finite value (reference: Rust's correctly rounded `str::parse`;
    /// README: "both agree with `str::parse` bit for bit"). Values within
    /// [-1, 1] go through the required `rate` column, others through the
    /// optional `quantity` column (any finite value); refused texts through
    /// `rate`. Surrounding ASCII spaces are trimmed first, as the reader does.
    #[test]
    fn numbers_parse_like_str_parse(t in decimal_text()) {
        let s = schema_of(&ALL);
        let mut fields: Vec<Vec<u8>> = VALID.iter().map(|f| f.as_bytes().to_vec()).collect();
        // Surrounding ASCII spaces are allowed (the reader trims them, as
        // spreadsheet exports pad cells); inner ones are not.
        let want = t.trim_ascii().parse::<f64>();
        let (col, name) = match want {
            Ok(v) if v.is_finite() && v.abs() > 1.0 => (12, "quantity"),
            _ => (4, "rate"),
        };
        fields[col] = t.as_bytes().to_vec();
        let rec = Record::from_fields(&fields);
        let got = parse_row(&s, &rec, 1, 2);
        match (want, got) {
            (Ok(v), Ok(row)) if v.is_finite() => {
                let x = if col == 4 { row.contract.rate } else { row.quantity };
                prop_assert_eq!(x.to_bits(), v.to_bits(), "{:?} read as {:e}, str::parse gives {:e}", t, x, v);
            }
            (Ok(v), Ok(row)) => {
                prop_assert!(false, "{:?} (= {}) accepted as rate {}", t, v, row.contract.rate);
            }
            (Ok(v), Err(e)) if v.is_finite() => {
                prop_assert!(false, "{:?} = {:e} refused: {}", t, v, e);
            }
            (_, Err(e)) => {
                prop_assert_eq!(e.line, 2);
                prop_assert!(names_word(&e.message, name), "{:?}: message '{}' does not name {}", t, e.message, name);
            }
            (Err(_), Ok(row)) => {
                prop_assert!(false, "{:?} refused by str::parse but read as rate {:e}", t, row.contract.rate);
            }
        }
    }
}

/// True when `name` occurs in `msg` as a whole word (`_` is a word
/// character, so `rate` is not found in `jump_rate`).
fn names_word(msg: &str, name: &str) -> bool {
    let word = |c: char| c.is_alphanumeric() || c == '_';
    msg.match_indices(name).any(|(i, _)| {
        let before = msg[..i].chars().next_back();
        let after = msg[i + name.len()..].chars().next();
        !before.is_some_and(word) && !after.is_some_and(word)
    })
}

// ---------------------------------------------------------- row validator --

/// A value and how it is written.
#[derive(Debug, Clone, Copy)]
struct Written {
    value: f64,
    style: u8,
}

impl Written {
    fn text(&self) -> String {
        let v = self.value;
        match self.style % 6 {
            0 => format!("{v}"),
            1 => format!("{v:e}"),
            2 => format!("{v:E}"),
            3 => format!("{v:?}"),
            4 if v.is_sign_positive() => format!("+{v:e}"),
            5 if v.is_sign_positive() => format!("00{v}"),
            _ => format!("{v}"),
        }
    }
}

fn written(values: impl Strategy<Value = f64>) -> impl Strategy<Value = Written> {
    (values, any::<u8>()).prop_map(|(value, style)| Written { value, style })
}

/// Log-uniform positive doubles over the whole finite range, and the edges.
fn positive() -> impl Strategy<Value = f64> {
    prop_oneof![
        4 => 1e-3..1e5f64,
        3 => (-323.0..308.0f64).prop_map(|e| 10f64.powf(e)).prop_filter("positive", |x| *x > 0.0),
        1 => prop::sample::select(vec![5e-324, 1e-320, f64::MIN_POSITIVE, 1e-300, 1e300, f64::MAX]),
    ]
}

/// `lo..=hi` with both edges and `-0` where `lo <= 0`.
fn closed(lo: f64, hi: f64) -> impl Strategy<Value = f64> {
    let mut edges = vec![lo, hi];
    if lo <= 0.0 {
        edges.extend([0.0, -0.0, 5e-324]);
    }
    prop_oneof![4 => lo..=hi, 1 => prop::sample::select(edges)]
}

fn any_finite() -> impl Strategy<Value = f64> {
    prop_oneof![
        3 => -1e6..1e6f64,
        1 => any::<f64>().prop_filter("finite", |x| x.is_finite()),
        1 => prop::sample::select(vec![0.0, -0.0, 1e308, -1e308, 5e-324, f64::MAX, f64::MIN]),
    ]
}

fn free_text() -> impl Strategy<Value = String> {
    vec(
        prop::sample::select(vec![
            'a', 'Z', '7', '-', ' ', '\t', 'é', '漢', '(', ')', '.',
        ]),
        0..12,
    )
    .prop_map(|c| c.into_iter().collect())
}

/// A row inside the documented domain (README "CSV books", `Contract::new`):
/// spot, strike > 0; 0 <= expiry <= 1000; |rate|, |div_yield| <= 1;
/// 0 <= vol <= 10; jump_rate >= 0 with jump_rate x expiry <= 1e5;
/// |jump_mean| <= 20; 0 <= jump_vol <= 20; quantity, multiplier finite.
#[derive(Debug, Clone)]
struct DomainRow {
    kind: (OptionKind, String),
    spot: Written,
    strike: Written,
    expiry: Written,
    rate: Written,
    div_yield: Written,
    vol: Written,
    jump_rate: Written,
    jump_mean: Written,
    jump_vol: Written,
    quantity: Written,
    multiplier: Written,
    id: String,
    underlying: String,
    /// Which optional columns the book has (id, underlying, div_yield,
    /// quantity, multiplier) and whether each present one is empty.
    present: [bool; 5],
    empty: [bool; 5],
    /// Unknown extra columns.
    extra: usize,
    /// Column order and header spelling.
    order_seed: u64,
    line: u64,
}

fn kind() -> impl Strategy<Value = (OptionKind, String)> {
    prop::sample::select(vec![
        (OptionKind::Call, "call"),
        (OptionKind::Put, "put"),
        (OptionKind::Call, "Call"),
        (OptionKind::Put, "PUT"),
        (OptionKind::Call, " CALL "),
        (OptionKind::Put, "pUt "),
    ])
    .prop_map(|(k, s)| (k, s.to_string()))
}

prop_compose! {
    fn domain_row()(
        kind in kind(),
        spot in written(positive()),
        strike in written(positive()),
        expiry in written(prop_oneof![4 => 0.0..=1000.0f64, 1 => prop::sample::select(vec![0.0, 5e-324, 1e-300, 1000.0])]),
        rate in written(closed(-1.0, 1.0)),
        div_yield in written(closed(-1.0, 1.0)),
        vol in written(closed(0.0, 10.0)),
        jump_rate in written(prop_oneof![3 => 0.0..5.0f64, 1 => positive(), 1 => Just(0.0)]),
        jump_mean in written(closed(-20.0, 20.0)),
        jump_vol in written(closed(0.0, 20.0)),
        quantity in written(any_finite()),
        multiplier in written(any_finite()),
        id in free_text(),
        underlying in free_text(),
        present in any::<[bool; 5]>(),
        empty in any::<[bool; 5]>(),
        extra in 0usize..3,
        order_seed in any::<u64>(),
        line in 2u64..1_000_000,
    ) -> DomainRow {
        DomainRow { kind, spot, strike, expiry, rate, div_yield, vol, jump_rate, jump_mean,
            jump_vol, quantity, multiplier, id, underlying, present, empty, extra, order_seed, line }
    }
}

/// Domain rows, with a jump rate too large for the expiry brought down to
/// the largest one allowed (so the edge jump_rate x expiry = 1e5 is met).
fn domain_rows() -> impl Strategy<Value = DomainRow> {
    domain_row().prop_map(|mut r| {
        let t = r.expiry.value;
        let mut jr = r.jump_rate.value;
        if jr * t > 1e5 {
            jr = 1e5 / t;
            while jr * t > 1e5 {
                jr = f64::from_bits(jr.to_bits() - 1);
            }
            r.jump_rate.value = jr;
        }
        r
    })
}

/// SplitMix64, for the column order.
fn splitmix(state: &mut u64) -> u64 {
    *state = state.wrapping_add(0x9e37_79b9_7f4a_7c15);
    let mut z = *state;
    z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
    z ^ (z >> 31)
}

impl DomainRow {
    /// (column name, field text) pairs, before shuffling.
    fn columns(&self) -> Vec<(String, Vec<u8>)> {
        let mut cols: Vec<(String, Vec<u8>)> = vec![
            ("kind".into(), self.kind.1.clone().into_bytes()),
            ("spot".into(), self.spot.text().into_bytes()),
            ("strike".into(), self.strike.text().into_bytes()),
            ("expiry".into(), self.expiry.text().into_bytes()),
            ("rate".into(), self.rate.text().into_bytes()),
            ("vol".into(), self.vol.text().into_bytes()),
            ("jump_rate".into(), self.jump_rate.text().into_bytes()),
            ("jump_mean".into(), self.jump_mean.text().into_bytes()),
            ("jump_vol".into(), self.jump_vol.text().into_bytes()),
        ];
        let optional = [
            ("id", self.id.clone()),
            ("underlying", self.underlying.clone()),
            ("div_yield", self.div_yield.text()),
            ("quantity", self.quantity.text()),
            ("multiplier", self.multiplier.text()),
        ];
        for (i, (name, text)) in optional.into_iter().enumerate() {
            if self.present[i] {
                let t = if self.empty[i] { String::new() } else { text };
                cols.push((name.into(), t.into_bytes()));
            }
        }
        for e in 0..self.extra {
            cols.push((format!("note{e}"), b"anything, 1e999".to_vec()));
        }
        cols
    }

    /// Header and record with the columns shuffled and the names spelled
    /// in any case with surrounding spaces (README: names are found by
    /// header name, in any order, case-insensitive, spaces trimmed).
    fn header_and_record(&self, cols: &[(String, Vec<u8>)]) -> (Vec<Vec<u8>>, Vec<Vec<u8>>) {
        let mut idx: Vec<usize> = (0..cols.len()).collect();
        let mut s = self.order_seed;
        for i in (1..idx.len()).rev() {
            let j = (splitmix(&mut s) % (i as u64 + 1)) as usize;
            idx.swap(i, j);
        }
        let spell = |name: &str, r: u64| -> Vec<u8> {
            let n = match r % 4 {
                0 => name.to_string(),
                1 => name.to_uppercase(),
                2 => format!(" {name} "),
                _ => name
                    .chars()
                    .enumerate()
                    .map(|(i, c)| {
                        if i % 2 == 0 {
                            c.to_ascii_uppercase()
                        } else {
                            c
                        }
                    })
                    .collect(),
            };
            n.into_bytes()
        };
        let header = idx
            .iter()
            .map(|&i| spell(&cols[i].0, splitmix(&mut s)))
            .collect();
        let record = idx.iter().map(|&i| cols[i].1.clone()).collect();
        (header, record)
    }

    fn schema_and_record(&self) -> (Schema, Record) {
        self.schema_and_record_with(&self.columns())
    }

    fn schema_and_record_with(&self, cols: &[(String, Vec<u8>)]) -> (Schema, Record) {
        let (h, r) = self.header_and_record(cols);
        (schema_of(&h), Record::from_fields(&r))
    }

    fn optional_value(&self, i: usize, w: &Written, default: f64) -> f64 {
        if self.present[i] && !self.empty[i] {
            w.value
        } else {
            default
        }
    }
}

fn same(a: f64, b: f64) -> bool {
    a.to_bits() == b.to_bits()
}

proptest! {
    #![proptest_config(config(3000))]

    /// A row inside the documented domain parses to exactly the values
    /// written; absent or empty optional cells take their documented
    /// defaults (README "CSV books").
    #[test]
    fn rows_in_the_domain_parse_to_the_values_written(r in domain_rows()) {
        let (schema, rec) = r.schema_and_record();
        let row = parse_row(&schema, &rec, 7, r.line);
        let row = match row {
            Ok(row) => row,
            Err(e) => return Err(TestCaseError::fail(format!("refused: {e}; record {:?}",
                rec.iter().map(|f| String::from_utf8_lossy(f).into_owned()).collect::<Vec<_>>()))),
        };
        let c = row.contract;
        prop_assert_eq!(c.kind, r.kind.0);
        for (name, got, want) in [
            ("spot", c.spot, r.spot.value),
            ("strike", c.strike, r.strike.value),
            ("expiry", c.expiry, r.expiry.value),
            ("rate", c.rate, r.rate.value),
            ("vol", c.vol, r.vol.value),
            ("jump_rate", c.jumps.rate, r.jump_rate.value),
            ("jump_mean", c.jumps.mean, r.jump_mean.value),
            ("jump_vol", c.jumps.vol, r.jump_vol.value),
            ("div_yield", c.div_yield, r.optional_value(2, &r.div_yield, 0.0)),
            ("quantity", row.quantity, r.optional_value(3, &r.quantity, 1.0)),
            ("multiplier", row.multiplier, r.optional_value(4, &r.multiplier, 1.0)),
        ] {
            prop_assert!(same(got, want), "{}: got {:e}, written {:e}", name, got, want);
        }
        prop_assert_eq!(row.row, 7);
        let underlying = if r.present[1] && !r.empty[1] { r.underlying.trim() } else { "" };
        prop_assert_eq!(row.underlying, underlying);
        if r.present[0] {
            let id = if r.empty[0] { "" } else { r.id.trim() };
            let got = row.id();
            prop_assert_eq!(got.as_ref(), id);
        }
        // The same values straight into the model are accepted too.
        let direct = Contract::new(c.kind, r.spot.value, r.strike.value, r.expiry.value,
            r.rate.value, c.div_yield, r.vol.value,
            JumpParams { rate: r.jump_rate.value, mean: r.jump_mean.value, vol: r.jump_vol.value });
        prop_assert_eq!(direct, Ok(c));
    }
}

/// How one field is spoiled.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Spoil {
    Empty,
    Garbage(usize),
    NotFinite(usize),
    OutOfRange(usize),
    Negative(usize),
    NotPositive(usize),
    BadUtf8,
}

const GARBAGE: [&str; 12] = [
    "abc", "1.2.3", "12x", "32%", "1,000", "0x10", "--1", "1e", ".", "-", "1 2", "\u{0}",
];
const NOT_FINITE: [&str; 7] = ["NaN", "nan", "inf", "-inf", "Infinity", "1e999", "-1e400"];

/// The spoiled text for a column, or `None` when that spoiling is valid
/// for it (an empty optional cell, a negative quantity, ...).
fn spoiled(name: &str, how: Spoil, expiry: f64) -> Option<Vec<u8>> {
    let numeric = !matches!(name, "kind" | "id" | "underlying");
    let required = !matches!(
        name,
        "id" | "underlying" | "div_yield" | "quantity" | "multiplier"
    );
    let pick = |list: &[&str], i: usize| Some(list[i % list.len()].as_bytes().to_vec());
    match how {
        Spoil::Empty if required => Some(Vec::new()),
        Spoil::Garbage(i) if numeric => pick(&GARBAGE, i),
        Spoil::Garbage(i) if name == "kind" => pick(
            &["straddle", "c all", "calls", "1", "\u{0}call", "put,call"],
            i,
        ),
        Spoil::NotFinite(i) if numeric => pick(&NOT_FINITE, i),
        Spoil::OutOfRange(i) => match name {
            "rate" | "div_yield" => pick(&["1.5", "-1.0000001", "1e10", "-2"], i),
            "expiry" => pick(&["1000.5", "1e300", "1001"], i),
            "vol" => pick(&["10.0001", "1e10", "11"], i),
            "jump_mean" => pick(&["20.5", "-21", "1e300"], i),
            "jump_vol" => pick(&["20.01", "1e300"], i),
            // jump_rate x expiry above 1e5.
            "jump_rate" if expiry > 0.0 => {
                let v = 2e5 / expiry;
                v.is_finite().then(|| format!("{v:e}").into_bytes())
            }
            _ => None,
        },
        Spoil::Negative(i) => match name {
            "expiry" | "vol" | "jump_rate" | "jump_vol" | "spot" | "strike" => {
                pick(&["-0.5", "-1e-300", "-5e-324", "-100"], i)
            }
            _ => None,
        },
        Spoil::NotPositive(i) if matches!(name, "spot" | "strike") => {
            pick(&["0", "-0", "0.0", "0e5"], i)
        }
        Spoil::BadUtf8 => Some(b"ab\xff\xfe".to_vec()),
        _ => None,
    }
}

fn spoil() -> impl Strategy<Value = Spoil> {
    prop_oneof![
        Just(Spoil::Empty),
        (0usize..100).prop_map(Spoil::Garbage),
        (0usize..100).prop_map(Spoil::NotFinite),
        (0usize..100).prop_map(Spoil::OutOfRange),
        (0usize..100).prop_map(Spoil::Negative),
        (0usize..100).prop_map(Spoil::NotPositive),
        Just(Spoil::BadUtf8),
    ]
}

proptest! {
    #![proptest_config(config(3000))]

    /// A domain row with one field spoiled (empty, garbage, NaN, inf, out of
    /// range, negative, zero, invalid UTF-8) is refused with an error that
    /// names that column and the line, never a panic (README "Bad input").
    #[test]
    fn rows_with_one_bad_field_name_the_column_and_line(
        r in domain_rows(),
        which in any::<prop::sample::Index>(),
        how in spoil(),
    ) {
        let mut cols = r.columns();
        // Spoil one of the known columns (not the extra ones).
        let known: Vec<usize> = (0..cols.len()).filter(|&i| !cols[i].0.starts_with("note")).collect();
        let i = known[which.index(known.len())];
        let name = cols[i].0.clone();
        let Some(text) = spoiled(&name, how, r.expiry.value) else {
            return Ok(()); // not a fault for this column
        };
        cols[i].1 = text.clone();
        let (schema, rec) = r.schema_and_record_with(&cols);
        match parse_row(&schema, &rec, 3, r.line) {
            Ok(row) => prop_assert!(false, "{} = {:?} accepted: {:?}", name, Text(text), row.contract),
            Err(e) => {
                prop_assert_eq!(e.line, r.line);
                let shown = e.to_string();
                let prefix = format!("line {}: ", r.line);
                prop_assert!(shown.starts_with(&prefix), "{}", shown);
                prop_assert!(names_word(&e.message, &name),
                    "{} = {:?}: message '{}' does not name the column", name, Text(text), e.message);
            }
        }
    }

    /// The model's own errors start with the field name (DEVELOPERS.md:
    /// "Model validation errors come from ModelError, whose messages start
    /// with the CSV column name").
    #[test]
    fn model_errors_start_with_the_field(r in domain_rows(), field in 0usize..9, bad in prop::sample::select(vec![f64::NAN, f64::INFINITY, f64::NEG_INFINITY, -1.0, 1e300, -1e300])) {
        let mut v = [r.spot.value, r.strike.value, r.expiry.value, r.rate.value, r.div_yield.value,
            r.vol.value, r.jump_rate.value, r.jump_mean.value, r.jump_vol.value];
        v[field] = bad;
        let names = ["spot", "strike", "expiry", "rate", "div_yield", "vol", "jump_rate", "jump_mean", "jump_vol"];
        let res = Contract::new(r.kind.0, v[0], v[1], v[2], v[3], v[4], v[5],
            JumpParams { rate: v[6], mean: v[7], vol: v[8] });
        // Which values are outside the domain for this field.
        let outside = match names[field] {
            "spot" | "strike" => !(bad > 0.0 && bad.is_finite()),
            "expiry" => !(0.0..=1000.0).contains(&bad),
            "rate" | "div_yield" => !(-1.0..=1.0).contains(&bad),
            "vol" => !(0.0..=10.0).contains(&bad),
            "jump_rate" => !(bad >= 0.0 && bad.is_finite() && bad * v[2] <= 1e5),
            "jump_mean" => !(-20.0..=20.0).contains(&bad),
            _ => !(0.0..=20.0).contains(&bad),
        };
        // An expiry change can push jump_rate x expiry out of range instead.
        let intensity_out = v[6] * v[2] > 1e5 && v[2].is_finite() && v[6].is_finite();
        match res {
            Ok(_) => prop_assert!(!outside, "{} = {} accepted", names[field], bad),
            Err(e) => {
                prop_assert!(outside || intensity_out, "{} = {} refused: {}", names[field], bad, e);
                let msg = e.to_string();
                if outside {
                    prop_assert!(msg.starts_with(names[field]), "{}", msg);
                }
            }
        }
    }
}
