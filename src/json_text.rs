//! Writing JSON text by hand where a serializer would cost more than the bytes: the log line
//! of every request.
//!
//! The output is the bytes `serde_json` writes for the same values: strings escaped the same
//! way (`\"`, `\\`, `\b`, `\f`, `\n`, `\r`, `\t`, any other control character as `\u00XX` in
//! lower-case hex, everything else as it is), finite doubles in the shortest form that reads
//! back to the same double (`zmij`, the writer serde_json uses: `1.0`, `1e+21`), a double that
//! is not finite as `null`, integers in decimal (`itoa`). This module writes; it never parses.

/// The escape of each byte below 0x20, `"` and `\` (0: written as it is).
const ESCAPE: [u8; 256] = {
    let mut table = [0u8; 256];
    let mut b = 0;
    while b < 0x20 {
        table[b] = b'u';
        b += 1;
    }
    table[0x08] = b'b';
    table[0x09] = b't';
    table[0x0a] = b'n';
    table[0x0c] = b'f';
    table[0x0d] = b'r';
    table[b'"' as usize] = b'"';
    table[b'\\' as usize] = b'\\';
    table
};

/// Append `text` as a JSON string, quotes included.
pub fn push_str(out: &mut String, text: &str) {
    out.push('"');
    let bytes = text.as_bytes();
    let mut start = 0;
    for (i, &byte) in bytes.iter().enumerate() {
        let escape = ESCAPE[byte as usize];
        if escape == 0 {
            continue;
        }
        // Every escaped byte is ASCII, so `start` and `i` fall on character boundaries.
        out.push_str(&text[start..i]);
        start = i + 1;
        if escape == b'u' {
            const HEX: &[u8; 16] = b"0123456789abcdef";
            out.push_str("\\u00");
            out.push(char::from(HEX[(byte >> 4) as usize]));
            out.push(char::from(HEX[(byte & 0xf) as usize]));
        } else {
            out.push('\\');
            out.push(char::from(escape));
        }
    }
    out.push_str(&text[start..]);
    out.push('"');
}

/// Append a double: the shortest round-trip form, or `null` when it is not finite.
pub fn push_f64(out: &mut String, value: f64) {
    if value.is_finite() {
        out.push_str(zmij::Buffer::new().format_finite(value));
    } else {
        out.push_str("null");
    }
}

/// Append an unsigned integer.
pub fn push_u64(out: &mut String, value: u64) {
    out.push_str(itoa::Buffer::new().format(value));
}

/// Append a signed integer.
pub fn push_i64(out: &mut String, value: i64) {
    out.push_str(itoa::Buffer::new().format(value));
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Reference: serde_json's own serializer, the writer every other answer goes through.
    #[test]
    fn strings_are_written_as_serde_json_writes_them() {
        let every_control: String = (0u8..0x20).map(char::from).collect();
        for text in [
            "",
            "plain",
            "quote \" and backslash \\",
            "tab\tnew line\nreturn\r",
            &every_control,
            "\u{7f} del, é, 日本, 🦀",
            "/models/{name}/probability",
        ] {
            let mut out = String::new();
            push_str(&mut out, text);
            assert_eq!(
                out,
                serde_json::to_string(text).expect("a string serializes"),
                "{text:?}"
            );
        }
    }

    /// Reference: serde_json's serializer; every double read back is the same double.
    #[test]
    fn numbers_are_written_as_serde_json_writes_them() {
        for value in [
            0.0,
            -0.0,
            1.0,
            0.1,
            1e-7,
            123_456_789.0,
            1e21,
            2.2250738585072014e-308,
            5e-324,
            f64::MAX,
            0.123_456_789_012_345_68,
        ] {
            let mut text = String::new();
            push_f64(&mut text, value);
            assert_eq!(text, serde_json::to_string(&value).expect("a double"));
            assert_eq!(
                text.parse::<f64>().expect("a number").to_bits(),
                value.to_bits()
            );
        }
        for value in [f64::NAN, f64::INFINITY, f64::NEG_INFINITY] {
            let mut out = String::new();
            push_f64(&mut out, value);
            assert_eq!(out, "null");
        }
        for value in [0u64, 7, u64::MAX] {
            let mut out = String::new();
            push_u64(&mut out, value);
            assert_eq!(out, serde_json::to_string(&value).expect("an integer"));
        }
        for value in [i64::MIN, -1, 0, 42] {
            let mut out = String::new();
            push_i64(&mut out, value);
            assert_eq!(out, serde_json::to_string(&value).expect("an integer"));
        }
    }
}
