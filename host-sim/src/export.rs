//! Export a board configuration as Rust source for a board crate, with the
//! core's fingerprint of it ([`diodestat_core::ValidConfig::fingerprint`]),
//! which the firmware computes again at start, so what was simulated is
//! what is flashed.
//!
//! The source is generated from the core's own types: [`Tree`] is a serde
//! `Serializer` that takes the `Serialize` of [`Config`] (the core's `serde`
//! feature: fixed-point values as their raw bits) apart into a tree of
//! struct literals, and [`rust_module`] writes that tree as Rust, each value
//! annotated with its engineering value and unit (from the field name's
//! unit suffix, `_iu`, `_ou_per_ms`, `_degc`, ..., and the board's units).
//! A field added to the core appears in the export without a change here.

use std::collections::BTreeSet;
use std::fmt::{self, Write as _};

use diodestat_core::{Config, Fx, Gain, Units, ValidConfig};
use serde::ser::{self, Serialize};

use crate::units::Scale;

/// The generated source as lines of code, each with the engineering value
/// and unit of what it sets (empty where the line sets nothing).
#[derive(Default)]
struct Lines(Vec<(String, String)>);

impl Lines {
    fn code(&mut self, code: impl Into<String>) {
        self.0.push((code.into(), String::new()));
    }
    /// A line with its note after it.
    fn note(&mut self, code: impl Into<String>, note: impl Into<String>) {
        self.0.push((code.into(), note.into()));
    }
    /// The lines with their comments, as written.
    fn annotated(&self) -> String {
        let mut s = String::new();
        for (c, n) in &self.0 {
            s.push_str(c);
            if !n.is_empty() {
                let _ = write!(s, " // {n}");
            }
            s.push('\n');
        }
        s
    }
}

/// A derived value to 6 significant digits, without trailing zeros.
fn eng(v: f64) -> String {
    crate::units::sig_text(v, 6)
}

fn plural(n: i128, one: &str) -> String {
    format!("{n} {one}{}", if n == 1 { "" } else { "s" })
}

/// A value of the configuration as the core's `Serialize` gives it.
#[derive(Clone, Debug, PartialEq)]
pub enum Node {
    /// A struct literal: its type name and fields in declaration order.
    Struct {
        /// The Rust type name.
        name: &'static str,
        /// Field names and values.
        fields: Vec<(&'static str, Node)>,
    },
    /// A table (a `heapless::Vec`).
    Seq(Vec<Node>),
    /// An `Option`.
    Opt(Option<Box<Node>>),
    /// An integer.
    Int(i128),
    /// A boolean.
    Bool(bool),
    /// A fixed-point value as its raw bits: a [`Gain`] (I8F24) or an
    /// [`Fx`] (I16F16).
    Bits {
        /// Whether it is a `Gain`.
        gain: bool,
        /// The raw bits.
        bits: i32,
    },
    /// A unit enum variant, `Type::Variant`.
    Variant {
        /// The enum's name.
        ty: &'static str,
        /// The variant.
        name: &'static str,
    },
}

/// A value the Rust writer cannot express (a float, a string, a map): the
/// core's configuration has none.
#[derive(Debug, Clone, PartialEq)]
pub struct ExportError(String);

impl fmt::Display for ExportError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "the export cannot write {}", self.0)
    }
}

impl std::error::Error for ExportError {}

impl ser::Error for ExportError {
    fn custom<T: fmt::Display>(msg: T) -> Self {
        ExportError(msg.to_string())
    }
}

fn unsupported<T>(what: &str) -> Result<T, ExportError> {
    Err(ExportError(what.into()))
}

/// The serde `Serializer` that builds a [`Node`] tree.
#[derive(Debug, Clone, Copy)]
pub struct Tree;

/// A struct or sequence being built.
#[derive(Debug)]
pub struct Building {
    name: &'static str,
    fields: Vec<(&'static str, Node)>,
    items: Vec<Node>,
}

impl Building {
    fn new(name: &'static str) -> Self {
        Building {
            name,
            fields: Vec::new(),
            items: Vec::new(),
        }
    }
}

/// The tree of `value`.
pub fn tree<T: Serialize + ?Sized>(value: &T) -> Result<Node, ExportError> {
    value.serialize(Tree)
}

impl ser::Serializer for Tree {
    type Ok = Node;
    type Error = ExportError;
    type SerializeSeq = Building;
    type SerializeTuple = Building;
    type SerializeTupleStruct = ser::Impossible<Node, ExportError>;
    type SerializeTupleVariant = ser::Impossible<Node, ExportError>;
    type SerializeMap = ser::Impossible<Node, ExportError>;
    type SerializeStruct = Building;
    type SerializeStructVariant = ser::Impossible<Node, ExportError>;

    fn serialize_bool(self, v: bool) -> Result<Node, ExportError> {
        Ok(Node::Bool(v))
    }
    fn serialize_i8(self, v: i8) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_i16(self, v: i16) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_i32(self, v: i32) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_i64(self, v: i64) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_u8(self, v: u8) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_u16(self, v: u16) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_u32(self, v: u32) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_u64(self, v: u64) -> Result<Node, ExportError> {
        Ok(Node::Int(v.into()))
    }
    fn serialize_f32(self, _: f32) -> Result<Node, ExportError> {
        unsupported("a float")
    }
    fn serialize_f64(self, _: f64) -> Result<Node, ExportError> {
        unsupported("a float")
    }
    fn serialize_char(self, _: char) -> Result<Node, ExportError> {
        unsupported("a char")
    }
    fn serialize_str(self, _: &str) -> Result<Node, ExportError> {
        unsupported("a string")
    }
    fn serialize_bytes(self, _: &[u8]) -> Result<Node, ExportError> {
        unsupported("bytes")
    }
    fn serialize_none(self) -> Result<Node, ExportError> {
        Ok(Node::Opt(None))
    }
    fn serialize_some<T: Serialize + ?Sized>(self, v: &T) -> Result<Node, ExportError> {
        Ok(Node::Opt(Some(Box::new(v.serialize(Tree)?))))
    }
    fn serialize_unit(self) -> Result<Node, ExportError> {
        unsupported("a unit value")
    }
    fn serialize_unit_struct(self, name: &'static str) -> Result<Node, ExportError> {
        unsupported(name)
    }
    fn serialize_unit_variant(
        self,
        ty: &'static str,
        _index: u32,
        name: &'static str,
    ) -> Result<Node, ExportError> {
        Ok(Node::Variant { ty, name })
    }
    fn serialize_newtype_struct<T: Serialize + ?Sized>(
        self,
        name: &'static str,
        _: &T,
    ) -> Result<Node, ExportError> {
        unsupported(name)
    }
    fn serialize_newtype_variant<T: Serialize + ?Sized>(
        self,
        name: &'static str,
        _: u32,
        _: &'static str,
        _: &T,
    ) -> Result<Node, ExportError> {
        unsupported(name)
    }
    fn serialize_seq(self, _: Option<usize>) -> Result<Building, ExportError> {
        Ok(Building::new(""))
    }
    fn serialize_tuple(self, _: usize) -> Result<Building, ExportError> {
        Ok(Building::new(""))
    }
    fn serialize_tuple_struct(
        self,
        name: &'static str,
        _: usize,
    ) -> Result<Self::SerializeTupleStruct, ExportError> {
        unsupported(name)
    }
    fn serialize_tuple_variant(
        self,
        name: &'static str,
        _: u32,
        _: &'static str,
        _: usize,
    ) -> Result<Self::SerializeTupleVariant, ExportError> {
        unsupported(name)
    }
    fn serialize_map(self, _: Option<usize>) -> Result<Self::SerializeMap, ExportError> {
        unsupported("a map")
    }
    fn serialize_struct(self, name: &'static str, _: usize) -> Result<Building, ExportError> {
        Ok(Building::new(name))
    }
    fn serialize_struct_variant(
        self,
        name: &'static str,
        _: u32,
        _: &'static str,
        _: usize,
    ) -> Result<Self::SerializeStructVariant, ExportError> {
        unsupported(name)
    }
}

impl ser::SerializeSeq for Building {
    type Ok = Node;
    type Error = ExportError;
    fn serialize_element<T: Serialize + ?Sized>(&mut self, v: &T) -> Result<(), ExportError> {
        self.items.push(v.serialize(Tree)?);
        Ok(())
    }
    fn end(self) -> Result<Node, ExportError> {
        Ok(Node::Seq(self.items))
    }
}

impl ser::SerializeTuple for Building {
    type Ok = Node;
    type Error = ExportError;
    fn serialize_element<T: Serialize + ?Sized>(&mut self, v: &T) -> Result<(), ExportError> {
        ser::SerializeSeq::serialize_element(self, v)
    }
    fn end(self) -> Result<Node, ExportError> {
        ser::SerializeSeq::end(self)
    }
}

impl ser::SerializeStruct for Building {
    type Ok = Node;
    type Error = ExportError;
    fn serialize_field<T: Serialize + ?Sized>(
        &mut self,
        key: &'static str,
        v: &T,
    ) -> Result<(), ExportError> {
        self.fields.push((key, v.serialize(Tree)?));
        Ok(())
    }
    fn end(self) -> Result<Node, ExportError> {
        // The fixed crate writes an `Fx` as the struct `FixedI32 { bits }`;
        // the core writes a `Gain` as `Gain { bits }`.
        if let [("bits", Node::Int(b))] = self.fields.as_slice() {
            if let (Ok(bits), "FixedI32" | "Gain") = (i32::try_from(*b), self.name) {
                return Ok(Node::Bits {
                    gain: self.name == "Gain",
                    bits,
                });
            }
        }
        Ok(Node::Struct {
            name: self.name,
            fields: self.fields,
        })
    }
}

/// The quantity a channel or value measures, for its notes.
#[derive(Clone, Copy, Debug, PartialEq)]
enum Quantity {
    Current,
    Power,
    Voltage,
}

/// What the notes need besides the value itself.
struct Ctx {
    units: Units,
    tick_hz: u32,
    /// The tables met so far, written as constants before `config()`
    /// (an array in read-only data costs the firmware less flash than
    /// code that builds it): name, element type, length and rows.
    tables: std::cell::RefCell<Vec<(String, &'static str, usize, Lines)>>,
}

impl Ctx {
    /// Milli-units per board unit and the milli-unit's name.
    fn milli(&self, q: Quantity) -> (f64, &'static str) {
        match q {
            Quantity::Current => (self.units.ma_per_iu(), "mA"),
            Quantity::Power => (self.units.mw_per_ou(), "mW"),
            Quantity::Voltage => (self.units.mv_per_vu(), "mV"),
        }
    }
}

/// The quantity of a calibration channel, from its field name (the ADC
/// channels of `Calibration` and the forward-voltage channel's `cal`).
fn channel_quantity(field: &str, parent: &str) -> Option<Quantity> {
    match (parent, field) {
        (_, "monitor") => Some(Quantity::Power),
        (_, "current_sense") => Some(Quantity::Current),
        (_, "supply") | ("ForwardVoltage", "cal") => Some(Quantity::Voltage),
        _ => None,
    }
}

/// The unit a field name's suffix gives its value: the quantity per board
/// unit and its name in milli-units (`_iu_per_ou_ms`, `_ou_per_ms`,
/// `_iu`, ...), `None` for a name without one.
fn unit_of(field: &str, c: &Ctx) -> Option<(f64, String)> {
    use Quantity::*;
    let q = |s: &str| match s {
        "iu" => Some(Current),
        "ou" => Some(Power),
        "vu" => Some(Voltage),
        _ => None,
    };
    let parts: Vec<&str> = field.split('_').collect();
    // `..._X_per_Y_ms`, `..._X_per_Y`, `..._X_per_ms`, `..._X`.
    match parts.as_slice() {
        [.., "codes", "per", y] => {
            let (per, name) = c.milli(q(y)?);
            Some((1.0 / per, format!("codes per {name}")))
        }
        [.., x, "per", y, "ms"] => {
            let ((a, an), (b, bn)) = (c.milli(q(x)?), c.milli(q(y)?));
            Some((a / b, format!("{an}/({bn}*ms)")))
        }
        [.., x, "per", "ms"] => {
            let (a, an) = c.milli(q(x)?);
            Some((a, format!("{an}/ms")))
        }
        [.., x, "per", y] => {
            let ((a, an), (b, bn)) = (c.milli(q(x)?), c.milli(q(y)?));
            Some((a / b, format!("{an}/{bn}")))
        }
        [.., x] => {
            let (a, an) = c.milli(q(x)?);
            Some((a, an.to_string()))
        }
        [] => None,
    }
}

/// Words a few fields add to their value's note.
fn describe(field: &str) -> &'static str {
    match field {
        "handover_fraction" => " of the setpoint",
        "warning_margin" => " of the healthy current (end-of-life warning)",
        "fault_margin" => " of the healthy current (fault)",
        "offset_counts" => " at zero input",
        "low_fault_counts" => " and below: sensor at its low rail",
        "high_fault_counts" => " and above: sensor at its high rail",
        "missed_tick_limit" => " missed in a row",
        _ => "",
    }
}

fn int_of(fields: &[(&str, Node)], key: &str) -> Option<i128> {
    fields.iter().find_map(|(k, v)| match v {
        Node::Int(n) if *k == key => Some(*n),
        _ => None,
    })
}

fn bits_of(fields: &[(&str, Node)], key: &str) -> Option<f64> {
    fields.iter().find_map(|(k, v)| match v {
        Node::Bits { gain: true, bits } if *k == key => Some(Gain::from_bits(*bits).to_num()),
        Node::Bits { gain: false, bits } if *k == key => Some(Fx::from_bits(*bits).to_num()),
        _ => None,
    })
}

/// `10^e` as text.
fn decade(e: i128) -> String {
    eng(10f64.powi(e.clamp(-30, 30) as i32))
}

/// The note of one value: its engineering value and unit.
fn note(
    field: &str,
    v: &Node,
    siblings: &[(&str, Node)],
    parent: &str,
    channel: Option<Quantity>,
    c: &Ctx,
) -> String {
    let words = describe(field);
    let channel_unit = channel.map(|q| {
        let (per, name) = c.milli(q);
        let name = if q == Quantity::Power {
            "mW (front facet)"
        } else {
            name
        };
        (per, name)
    });
    match v {
        Node::Bits { gain, bits } => {
            let x: f64 = if *gain {
                Gain::from_bits(*bits).to_num()
            } else {
                Fx::from_bits(*bits).to_num()
            };
            if field == "units_per_count" {
                return match channel_unit {
                    Some((per, name)) => format!("{} {name} per count", eng(x * per)),
                    None => format!("{} units per count", eng(x)),
                };
            }
            if field.ends_with("_degc") || field == "degc" {
                return format!("{} degC", Fx::from_bits(*bits));
            }
            match unit_of(field, c) {
                Some((per, unit)) => format!("{} {unit}{words}", eng(x * per)),
                None if *gain => format!("{}{words}", Gain::from_bits(*bits)),
                None => format!("{}{words}", Fx::from_bits(*bits)),
            }
        }
        Node::Int(n) => {
            let n = *n;
            if field == "tick_hz" {
                return format!("{n} Hz = {} us per tick", eng(1e6 / (n.max(1) as f64)));
            }
            if field.contains("debounce") {
                let hz = c.tick_hz.max(1);
                let ms = n as f64 * 1e3 / f64::from(hz);
                return format!("{} = {} ms at {hz} Hz", plural(n, "tick"), eng(ms));
            }
            if field == "intermittent_weight" {
                return format!("a present tick adds {n}, a clean tick removes 1 (leaky debounce)");
            }
            if field.ends_with("_tick_limit") {
                return format!("{}{words}", plural(n, "tick"));
            }
            if field.ends_with("_ms") {
                return format!("{n} ms");
            }
            if field == "unit_exp" {
                return match (parent, channel) {
                    ("DacCal", _) => format!("codes per {} A", decade(n)),
                    (_, Some(q)) => format!(
                        "reads in units of {} {}",
                        decade(n),
                        match q {
                            Quantity::Current => "A",
                            Quantity::Power => "W",
                            Quantity::Voltage => "V",
                        }
                    ),
                    _ => format!("units of 10^{n}"),
                };
            }
            if field == "full_scale_counts" {
                let off = int_of(siblings, "offset_counts").unwrap_or(0);
                let per_count = bits_of(siblings, "units_per_count").unwrap_or(0.0);
                if let Some((per, name)) = channel_unit {
                    let name = name.trim_end_matches(" (front facet)");
                    return format!(
                        "{n} counts full scale = {} {name}",
                        eng((n - off) as f64 * per_count * per)
                    );
                }
                return format!("{n} counts full scale");
            }
            if field == "offset_codes" {
                return format!("{n} codes at 0 mA");
            }
            if field == "max_code" {
                let off = int_of(siblings, "offset_codes").unwrap_or(0);
                let codes_per_iu = bits_of(siblings, "codes_per_iu").unwrap_or(0.0);
                let ma = (n - off) as f64 / codes_per_iu * c.units.ma_per_iu();
                return format!("{n} codes = {} mA", eng(ma));
            }
            if field.ends_with("counts") {
                return format!("{n} counts{words}");
            }
            format!("{n}{words}")
        }
        Node::Variant { name, .. } => {
            format!("{}: {}", field.replace('_', " "), name.to_lowercase())
        }
        Node::Bool(b) => format!("{b}"),
        Node::Opt(None) => format!("no {}", field.replace('_', " ")),
        _ => String::new(),
    }
}

/// Rust source of a leaf value.
fn leaf(v: &Node) -> Option<String> {
    match v {
        Node::Int(n) => Some(n.to_string()),
        Node::Bool(b) => Some(b.to_string()),
        Node::Bits { gain: true, bits } => Some(format!("Gain::from_bits({bits})")),
        Node::Bits { gain: false, bits } => Some(format!("Fx::from_bits({bits})")),
        Node::Variant { ty, name } => Some(format!("{ty}::{name}")),
        Node::Opt(None) => Some("None".into()),
        _ => None,
    }
}

/// The type names a tree uses (for its `use` line).
fn names(v: &Node, out: &mut BTreeSet<&'static str>) {
    match v {
        Node::Struct { name, fields } => {
            out.insert(name);
            for (_, f) in fields {
                names(f, out);
            }
        }
        Node::Seq(items) => items.iter().for_each(|i| names(i, out)),
        Node::Opt(Some(b)) => names(b, out),
        Node::Bits { gain: true, .. } => {
            out.insert("Gain");
        }
        Node::Bits { gain: false, .. } => {
            out.insert("Fx");
        }
        Node::Variant { ty, .. } => {
            out.insert(ty);
        }
        _ => {}
    }
}

/// Write the fields of a struct literal at `indent`.
fn write_fields(
    l: &mut Lines,
    name: &str,
    fields: &[(&'static str, Node)],
    indent: usize,
    channel: Option<Quantity>,
    c: &Ctx,
) {
    let pad = " ".repeat(indent);
    for (field, v) in fields {
        let head = format!("{pad}{field}: ");
        write_value(l, &head, ",", field, v, fields, name, channel, c, indent);
    }
}

/// Write one value: `head` before it (a field name, or nothing in a
/// table), `tail` after it.
#[allow(clippy::too_many_arguments)]
fn write_value(
    l: &mut Lines,
    head: &str,
    tail: &str,
    field: &str,
    v: &Node,
    siblings: &[(&str, Node)],
    parent: &str,
    channel: Option<Quantity>,
    c: &Ctx,
    indent: usize,
) {
    let pad = " ".repeat(indent);
    if let Some(code) = leaf(v) {
        l.note(
            format!("{head}{code}{tail}"),
            note(field, v, siblings, parent, channel, c),
        );
        return;
    }
    match v {
        Node::Struct { name, fields } => {
            l.code(format!("{head}{name} {{"));
            let inner = channel_quantity(field, parent).or(channel);
            write_fields(l, name, fields, indent + 4, inner, c);
            l.code(format!("{pad}}}{tail}"));
        }
        Node::Opt(Some(inner)) => match leaf(inner) {
            Some(code) => l.note(
                format!("{head}Some({code}){tail}"),
                note(field, inner, siblings, parent, channel, c),
            ),
            None => write_value(
                l,
                &format!("{head}Some("),
                &format!("){tail}"),
                field,
                inner,
                siblings,
                parent,
                channel,
                c,
                indent,
            ),
        },
        Node::Seq(items) => {
            let ty = match items.first() {
                Some(Node::Struct { name, .. }) => *name,
                _ => {
                    l.code(format!("{head}heapless::Vec::new(){tail}"));
                    return;
                }
            };
            // `TempCal.table` becomes `TEMP_CAL_TABLE`.
            let mut name = String::new();
            for ch in parent.chars() {
                if ch.is_ascii_uppercase() && !name.is_empty() {
                    name.push('_');
                }
                name.push(ch.to_ascii_uppercase());
            }
            name = format!("{name}_{}", field.to_ascii_uppercase());
            let mut rows = Lines::default();
            for item in items {
                write_value(
                    &mut rows, "    ", ",", field, item, siblings, parent, channel, c, 4,
                );
            }
            l.note(
                format!("{head}heapless::Vec::from_slice(&{name}).unwrap_or_default(){tail}"),
                format!("see {name}"),
            );
            c.tables.borrow_mut().push((name, ty, items.len(), rows));
        }
        _ => {}
    }
}

/// A board name as it may stand in a comment of generated source: letters,
/// digits, space and `- _ . + ( ) /` kept, anything else (a line break, a
/// backtick, a comment end) written as its `\u{..}` code, so no name can
/// put text into the exported source. Board files refuse such names; this
/// holds for any caller.
pub fn comment_text(name: &str) -> String {
    name.chars()
        .map(|c| {
            if c.is_ascii_alphanumeric()
                || matches!(c, ' ' | '-' | '_' | '.' | '+' | '(' | ')' | '/')
            {
                c.to_string()
            } else {
                format!("\\u{{{:x}}}", u32::from(c))
            }
        })
        .collect()
}

/// The `config()` body and the type names it uses.
fn body(c: &Config) -> Result<(String, BTreeSet<&'static str>), ExportError> {
    let t = tree(c)?;
    let mut used = BTreeSet::new();
    names(&t, &mut used);
    let ctx = Ctx {
        units: c.units(),
        tick_hz: c.tick_hz,
        tables: Default::default(),
    };
    let mut l = Lines::default();
    write_value(&mut l, "    ", "", "config", &t, &[], "", None, &ctx, 4);
    let mut out = String::new();
    for (name, ty, n, rows) in ctx.tables.borrow().iter() {
        let _ = write!(
            out,
            "/// `{name}`: a table of the configuration, in `config()`.\npub const {name}: [{ty}; {n}] = [\n{}];\n\n",
            rows.annotated()
        );
    }
    let _ = write!(
        out,
        "/// The board configuration (validate it at start-up).\npub fn config() -> Config {{\n{}}}\n",
        l.annotated()
    );
    Ok((out, used))
}

/// The whole generated file: every value annotated with its engineering
/// value and unit, and `CONFIG_FINGERPRINT`, the core's fingerprint of the
/// configuration (which the board compares with its own at start).
pub fn rust_module(name: &str, v: &ValidConfig) -> String {
    let c = v.config();
    let name = comment_text(name);
    let fingerprint = v.fingerprint();
    let (body, mut used) = match body(c) {
        Ok(b) => b,
        // Not reached for the core's `Config` (no floats, strings or maps;
        // a test serializes every shipped board); the board crate would
        // refuse to build with the reason.
        Err(e) => (
            format!(
                "pub fn config() -> Config {{\n    compile_error!(\"{}\")\n}}\n",
                comment_text(&e.to_string())
            ),
            BTreeSet::new(),
        ),
    };
    used.insert("Config");
    used.insert("Fingerprint");
    let uses = used.into_iter().collect::<Vec<_>>().join(", ");
    format!(
        "//! Board configuration `{name}`, generated by `diodestat export`; regenerate instead of editing.\n\
         //! Values are raw fixed-point bits (`Fx` I16F16, `Gain` I8F24) in the board's units (each\n\
         //! channel's `unit_exp`: `_iu` current, `_ou` optical power, `_vu` voltage); the comment on each line gives the\n\
         //! engineering value and unit they stand for.\n\n\
         use diodestat_core::{{{uses}}};\n\n\
         /// `config().validate()?.fingerprint()` as the simulator computed it: the board computes it\n\
         /// again at start and reports both (a hand-edited constant below makes them differ).\n\
         pub const CONFIG_FINGERPRINT: Fingerprint = Fingerprint::from_u64(0x{fingerprint});\n\n\
         {body}"
    )
}
#[cfg(test)]
mod tests {
    use super::*;

    fn demo() -> ValidConfig {
        crate::calibration::calibrate(
            diodestat_core::example::config(),
            &crate::plant::DemoModule::visible(),
        )
        .validate()
        .unwrap()
    }

    #[test]
    fn the_file_carries_the_cores_fingerprint() {
        let v = demo();
        let line = format!(
            "pub const CONFIG_FINGERPRINT: Fingerprint = Fingerprint::from_u64(0x{});",
            v.fingerprint()
        );
        assert!(rust_module("t", &v).contains(&line));
        // The name is not part of the configuration.
        assert!(rust_module("other", &v).contains(&line));
        // Another configuration, another fingerprint in the file.
        let mut c = v.config().clone();
        c.apc.ki_iu_per_ou_ms += Fx::from_bits(1);
        assert!(!rust_module("t", &c.validate().unwrap()).contains(&line));
    }

    #[test]
    fn a_name_cannot_put_text_into_the_source() {
        let src = rust_module("x`\npub fn evil() {}\n/* */ \\", &demo());
        assert!(!src.lines().any(|l| l.starts_with("pub fn evil")), "{src}");
        let first = src.lines().next().unwrap();
        assert_eq!(
            first,
            "//! Board configuration `x\\u{60}\\u{a}pub fn evil() \\u{7b}\\u{7d}\\u{a}/\\u{2a} \\u{2a}/ \\u{5c}`, generated by `diodestat export`; regenerate instead of editing."
        );
        assert_eq!(
            comment_text("Demo red (rev. B) 650-nm"),
            "Demo red (rev. B) 650-nm"
        );
    }

    /// Every field of the core's configuration is written, by its own name,
    /// with the value the configuration holds: the export follows the
    /// core's `Serialize`, so a field added there appears here.
    #[test]
    fn every_field_of_the_config_is_written() {
        let v = demo();
        let src = rust_module("t", &v);
        let json = serde_json::to_value(v.config()).unwrap();
        fn walk(v: &serde_json::Value, name: &str, src: &str, n: &mut usize) {
            match v {
                serde_json::Value::Object(m) if m.len() == 1 && m.contains_key("bits") => {
                    let bits = &m["bits"];
                    assert!(src.contains(&format!("{name}: ")), "{name}");
                    assert!(src.contains(&format!("::from_bits({bits})")), "{name}");
                    *n += 1;
                }
                serde_json::Value::Object(m) => {
                    for (k, v) in m {
                        walk(v, k, src, n);
                    }
                }
                serde_json::Value::Array(a) => a.iter().for_each(|v| walk(v, name, src, n)),
                serde_json::Value::Number(x) => {
                    assert!(src.contains(&format!("{name}: {x},")), "{name}: {x}");
                    *n += 1;
                }
                serde_json::Value::Null => assert!(src.contains(&format!("{name}: None,"))),
                serde_json::Value::String(s) => {
                    assert!(src.contains(&format!("{name}: Rail::{s},")), "{name}")
                }
                serde_json::Value::Bool(_) => unreachable!(),
            }
        }
        let mut n = 0;
        walk(&json, "config", &src, &mut n);
        assert!(n > 100, "{n} values");
        // Not a float, a string or a map anywhere.
        assert!(!src.contains("compile_error"), "{src}");
        assert_eq!(
            tree(&1.5f64).unwrap_err().to_string(),
            "the export cannot write a float"
        );
    }

    /// Every line that sets a value carries its engineering value and
    /// unit as a comment.
    #[test]
    fn every_constant_is_annotated_with_value_and_unit() {
        let v = demo();
        let c = v.config();
        let src = rust_module("t", &v);
        let setting = |l: &&str| {
            l.contains("from_bits(")
                || l.trim_start().split(':').nth(1).is_some_and(|v| {
                    let v = v
                        .split("//")
                        .next()
                        .unwrap_or("")
                        .trim()
                        .trim_end_matches(',');
                    v.parse::<f64>().is_ok() || v.starts_with("Rail::")
                })
        };
        let lines: Vec<&str> = src.lines().filter(setting).collect();
        assert!(lines.len() > 60, "{} value lines", lines.len());
        for l in &lines {
            let above = src
                .lines()
                .zip(src.lines().skip(1))
                .any(|(a, b)| b == *l && a.trim_start().starts_with("// "));
            assert!(l.contains(" // ") || above, "not annotated: {l}");
        }
        let kp = c.apc.kp_iu_per_ou;
        assert!(src.contains(&format!(
            "kp_iu_per_ou: Fx::from_bits({}), // {} mA/mW",
            kp.to_bits(),
            eng(kp.to_num::<f64>())
        )));
        let d = c.protection.overcurrent_debounce;
        let ms = f64::from(d) * 1e3 / f64::from(c.tick_hz);
        assert!(src.contains(&format!(
            "{d} tick{} = {} ms at {} Hz",
            if d == 1 { "" } else { "s" },
            eng(ms),
            c.tick_hz
        )));
        // A gain per count is written as a `Gain`, everything else fixed
        // as an `Fx`.
        let g = c.calibration.monitor.units_per_count;
        assert!(src.contains(&format!(
            "units_per_count: Gain::from_bits({}),",
            g.to_bits()
        )));
        assert_eq!(
            (eng(47.825967371463776), eng(26399.9998909235), eng(0.05)),
            ("47.826".into(), "26400".into(), "0.05".into())
        );
    }
}
