//! The one number formatter of every output (HTML, Markdown, LaTeX, CSV, the terminal) and HTML
//! escaping: [`sig`] rounds to significant figures and groups thousands; [`sig3`], [`samples`],
//! [`bytes`] and [`percent`] are its fixed uses; [`csv_sig`] and [`csv_samples`] print the same
//! rounded figure without separators for CSV, so a figure reads the same in every file.
//!
//! Every function is deterministic (no locale); a non-finite value prints as "—" (empty in CSV).

/// Escapes `&`, `<`, `>`, `"` and `'` for HTML text and attribute values.
pub fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&#39;"),
            _ => out.push(c),
        }
    }
    out
}

/// Inserts thousands separators into a string of ASCII digits (optionally signed).
fn group_digits(digits: &str) -> String {
    let (sign, body) = match digits.strip_prefix('-') {
        Some(rest) => ("-", rest),
        None => ("", digits),
    };
    let mut out = String::with_capacity(body.len() + body.len() / 3);
    for (i, c) in body.chars().enumerate() {
        if i > 0 && (body.len() - i) % 3 == 0 {
            out.push(',');
        }
        out.push(c);
    }
    format!("{sign}{out}")
}

/// A whole number with thousands separators: 24312.4 → "24,312".
pub fn thousands(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    let r = x.round();
    if r.abs() >= 1e18 {
        return format!("{x:.2e}");
    }
    group_digits(&format!("{}", r as i64))
}

/// Rounds to `digits` significant digits.
fn round_sig(x: f64, digits: i32) -> f64 {
    if x == 0.0 || !x.is_finite() {
        return x;
    }
    let mag = x.abs().log10().floor() as i32;
    let scale = 10f64.powi(digits - 1 - mag);
    (x * scale).round() / scale
}

/// `digits` significant figures (at least 1), with thousands separators from 1,000:
/// `sig(24312.0, 3)` → "24,300", `sig(1.23456, 3)` → "1.23", `sig(64.9, 2)` → "65". Values of
/// 10¹⁸ and more, or below 10⁻⁴, use e-notation.
pub fn sig(x: f64, digits: i32) -> String {
    sig_with(x, digits, true)
}

fn sig_with(x: f64, digits: i32, grouped: bool) -> String {
    let digits = digits.max(1);
    if !x.is_finite() {
        return "—".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let r = round_sig(x, digits);
    let mag = r.abs().log10().floor() as i32;
    if !(-4..18).contains(&mag) {
        return format!("{r:.*e}", (digits - 1) as usize);
    }
    if mag >= digits - 1 {
        let whole = format!("{}", r.round() as i64);
        if grouped {
            group_digits(&whole)
        } else {
            whole
        }
    } else {
        format!("{r:.*}", (digits - 1 - mag) as usize)
    }
}

/// Three significant digits, with thousands separators above 1,000: 24312 → "24,300",
/// 1.23456 → "1.23", 0.012345 → "0.0123". Very large or small values use e-notation.
pub fn sig3(x: f64) -> String {
    sig(x, 3)
}

/// A sample count rounded to a whole sample: whole numbers (rounded up) below 1,000, three
/// significant digits above.
fn samples_value(x: f64) -> f64 {
    if x.abs() < 1000.0 {
        x.ceil()
    } else {
        round_sig(x, 3)
    }
}

/// A sample count: whole numbers below 1,000, three significant digits above.
pub fn samples(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    thousands(samples_value(x))
}

/// [`sig`] for CSV: the same rounded figure without thousands separators ("24300"); empty
/// for a non-finite value.
pub fn csv_sig(x: f64, digits: i32) -> String {
    if !x.is_finite() {
        return String::new();
    }
    sig_with(x, digits, false)
}

/// [`samples`] for CSV: the same whole number without separators ("3070"); empty for a
/// non-finite value.
pub fn csv_samples(x: f64) -> String {
    if !x.is_finite() {
        return String::new();
    }
    format!("{}", samples_value(x) as i64)
}

/// Bytes in SI units (1 kB = 1,000 B) with three significant digits: 2.43e10 → "24.3 GB".
pub fn bytes(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    const UNITS: [&str; 7] = ["B", "kB", "MB", "GB", "TB", "PB", "EB"];
    let mut v = x;
    let mut unit = 0;
    while v.abs() >= 999.5 && unit + 1 < UNITS.len() {
        v /= 1000.0;
        unit += 1;
    }
    if unit == 0 {
        format!("{} B", thousands(v))
    } else {
        format!("{} {}", sig3(v), UNITS[unit])
    }
}

/// A share in [0, 1] as a whole percentage, one decimal below 10%: 0.034 → "3.4%".
pub fn percent(share: f64) -> String {
    if !share.is_finite() {
        return "—".into();
    }
    let p = share * 100.0;
    if p != 0.0 && p.abs() < 10.0 {
        format!("{p:.1}%")
    } else {
        format!("{p:.0}%")
    }
}

/// A general quantity (parameters, statistics, settings): four significant digits, trailing
/// zeros dropped, e-notation outside [1e-3, 1e6): 1.23456 → "1.235", 20.0 → "20",
/// 1.5e-6 → "1.5e-6".
pub fn number(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let trim = |s: String| -> String {
        if s.contains('.') {
            s.trim_end_matches('0').trim_end_matches('.').to_string()
        } else {
            s
        }
    };
    let mag = x.abs().log10().floor() as i32;
    if !(-3..6).contains(&mag) {
        let s = format!("{x:.3e}");
        let (mantissa, exponent) = s.split_once('e').unwrap_or((&s, "0"));
        format!("{}e{exponent}", trim(mantissa.to_string()))
    } else {
        trim(format!("{x:.*}", (3 - mag).max(0) as usize))
    }
}

/// A short tick label: at most three decimals, trailing zeros dropped: 5.0 → "5",
/// 2.9 → "2.9", 0.125 → "0.125"; thousands separators from 1,000.
pub fn short(x: f64) -> String {
    if !x.is_finite() {
        return "—".into();
    }
    if x.abs() >= 1000.0 {
        return thousands(x);
    }
    if x != 0.0 && x.abs() < 1e-3 {
        return format!("{x:.1e}");
    }
    let s = format!("{x:.3}");
    let s = s.trim_end_matches('0').trim_end_matches('.');
    if s == "-0" {
        "0".into()
    } else {
        s.into()
    }
}

/// An optional value formatted with `f`, or "—".
pub fn opt(x: Option<f64>, f: fn(f64) -> String) -> String {
    x.map(f).unwrap_or_else(|| "—".into())
}

/// A grid-point count: thousands separators, in e-notation from a million ("1.21e11").
pub fn grid_points(x: f64) -> String {
    if x >= 1e6 {
        format!("{x:.2e}")
    } else {
        thousands(x)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formats_by_hand() {
        assert_eq!(escape("<script>&\"'"), "&lt;script&gt;&amp;&quot;&#39;");
        assert_eq!(thousands(24312.4), "24,312");
        assert_eq!(thousands(-1234567.0), "-1,234,567");
        assert_eq!(thousands(999.0), "999");
        assert_eq!(sig3(24312.0), "24,300");
        assert_eq!(sig3(1.23456), "1.23");
        assert_eq!(sig3(0.012345), "0.0123");
        assert_eq!(sig3(9.996), "10.0");
        assert_eq!(sig3(0.0), "0");
        assert_eq!(samples(511.2), "512");
        assert_eq!(samples(35012.0), "35,000");
        assert_eq!(bytes(2.43e10), "24.3 GB");
        assert_eq!(bytes(512.0), "512 B");
        assert_eq!(bytes(1.5e12), "1.50 TB");
        assert_eq!(percent(0.034), "3.4%");
        assert_eq!(percent(0.5), "50%");
        assert_eq!(number(1.23456), "1.235");
        assert_eq!(number(1.5e-6), "1.5e-6");
        assert_eq!(number(20.0), "20");
        assert_eq!(number(123456.0), "123456");
        assert_eq!(number(0.01), "0.01");
        assert_eq!(sig3(f64::NAN), "—");
        assert_eq!(short(5.0), "5");
        assert_eq!(short(2.9), "2.9");
        assert_eq!(short(0.125), "0.125");
        assert_eq!(short(12000.0), "12,000");
        assert_eq!(sig(64.94, 2), "65");
        assert_eq!(sig(3316.0, 3), "3,320");
        assert_eq!(sig(1.5e21, 3), "1.50e21");
        assert_eq!(csv_sig(212217.8, 3), "212000");
        assert_eq!(csv_sig(0.0123456, 3), "0.0123");
        assert_eq!(csv_samples(3073.9), "3070");
        assert_eq!(csv_samples(511.2), "512");
        assert_eq!(csv_sig(f64::INFINITY, 3), "");
    }
}
