//! Answer receipts: the compact, sealed token that every scored observation's answer carries,
//! so that an outcome reported weeks later, to any replica, can be matched to the exact
//! prediction it judges without any replica keeping the answer.
//!
//! A receipt holds the model name, the version, the predicted probability (the exact `f64`
//! bits), the scoring time (milliseconds since the Unix epoch) and a random 128-bit id, sealed
//! with HMAC-SHA-256 under the first key of the key file and written in base64's URL-safe
//! alphabet without padding. Its bytes, before encoding:
//!
//! ```text
//! offset  bytes  field
//! 0       1      format, 1
//! 1       4      key fingerprint: SHA-256("ogive receipt key" ‖ key), first 4 bytes
//! 5       16     receipt id, from a ChaCha12 generator per thread seeded from the OS
//! 21      8      scoring time, ms since 1970-01-01T00:00:00Z, big-endian
//! 29      8      probability, IEEE 754 bits, big-endian
//! 37      1+m    model name: its length m, then its bytes
//! 38+m    1+v    version label: its length v, then its bytes
//! end−16  16     tag: HMAC-SHA-256(key, every byte above), its first 16 bytes (128 bits)
//! ```
//!
//! Keys: a key file holds one key a line, each at least 32 bytes (blank lines are skipped);
//! the first line seals, every line opens. To rotate, put the new key first and keep the old
//! one below it until receipts sealed with it have passed their maximum age. A key file that
//! others may read or write, or its group may write, is refused; its group may read it only
//! when root owns it (how Kubernetes mounts a Secret for a pod with an `fsGroup`: root-owned,
//! mode 0440, the pod's group; and how an administrator hands a root-owned key to a service's
//! group). Without a key file the server makes an
//! ephemeral key, and its receipts stop opening when the process ends. The fingerprint only
//! picks which key to try (so "sealed with a key this server does not hold" reads apart from
//! "altered"); the tag is checked in constant time by `hmac`. No key is ever logged or shown:
//! [`ReceiptKeys`]'s `Debug` shows fingerprints.
//!
//! This module does not know HTTP, decide what an outcome does, or remember which receipts
//! were reported ([`crate::monitoring::outcomes`] does).

use std::cell::RefCell;
use std::fmt;
use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime, UNIX_EPOCH};

use base64::engine::general_purpose::URL_SAFE_NO_PAD;
use base64::Engine;
use hmac::{Hmac, Mac};
use receipt_rand::rngs::{StdRng, SysRng};
use receipt_rand::{Rng, SeedableRng};
use sha2::{Digest, Sha256};

type Seal = Hmac<Sha256>;

/// The shortest key taken, in bytes: 256 bits, the size of HMAC-SHA-256's hash.
pub const MIN_KEY_BYTES: usize = 32;

/// Bytes of the HMAC-SHA-256 tag kept in a receipt.
pub const TAG_BYTES: usize = 16;

/// Bytes of a receipt id.
pub const ID_BYTES: usize = 16;

/// The default longest time after scoring that a receipt is taken: 400 days, long enough for
/// outcomes measured at twelve months plus a quarter's reporting delay.
pub const DEFAULT_MAX_AGE: Duration = Duration::from_secs(400 * 86_400);

const FORMAT: u8 = 1;
const FINGERPRINT_BYTES: usize = 4;
const FIXED_BYTES: usize = 1 + FINGERPRINT_BYTES + ID_BYTES + 8 + 8;
const SHORTEST: usize = FIXED_BYTES + 1 + 1 + TAG_BYTES;
/// The longest receipt's text: 255-byte name and version, in base64 (4 characters per 3 bytes).
pub const MAX_RECEIPT_CHARS: usize = (FIXED_BYTES + 2 + 2 * 255 + TAG_BYTES).div_ceil(3) * 4;

/// A receipt id: 128 random bits, shown as 32 lower-case hex digits.
#[derive(Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct ReceiptId([u8; ID_BYTES]);

impl ReceiptId {
    /// The id's bytes.
    pub fn as_bytes(&self) -> &[u8; ID_BYTES] {
        &self.0
    }
}

impl fmt::Display for ReceiptId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        self.0.iter().try_for_each(|b| write!(f, "{b:02x}"))
    }
}

impl fmt::Debug for ReceiptId {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "ReceiptId({self})")
    }
}

/// What an opened receipt says: only a receipt whose seal checked out becomes one.
#[derive(Debug, Clone, PartialEq)]
pub struct Receipt {
    id: ReceiptId,
    model: String,
    version: String,
    probability: f64,
    scored_at_ms: u64,
}

impl Receipt {
    /// The receipt's random id.
    pub fn id(&self) -> ReceiptId {
        self.id
    }

    /// The model that answered.
    pub fn model(&self) -> &str {
        &self.model
    }

    /// The version that answered.
    pub fn version(&self) -> &str {
        &self.version
    }

    /// The probability answered, bit for bit.
    pub fn probability(&self) -> f64 {
        self.probability
    }

    /// When it was scored, in milliseconds since the Unix epoch.
    pub fn scored_at_ms(&self) -> u64 {
        self.scored_at_ms
    }

    /// Time from scoring to `now_ms` (zero when the scoring replica's clock ran ahead).
    pub fn age(&self, now_ms: u64) -> Duration {
        Duration::from_millis(now_ms.saturating_sub(self.scored_at_ms))
    }
}

/// Why a receipt does not open.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum ReceiptError {
    /// Not text in base64's URL-safe alphabet without padding.
    #[error("the receipt is not URL-safe base64 text (A–Z, a–z, 0–9, '-', '_', no padding)")]
    NotBase64,
    /// Fewer bytes than the smallest receipt, or more than the largest.
    #[error("the receipt has {0} bytes, which no receipt has; it was cut short or altered")]
    WrongLength(usize),
    /// A format this server does not write.
    #[error("the receipt has format {0}, which this server does not read; it was altered")]
    UnknownFormat(u8),
    /// Sealed with a key this server does not hold.
    #[error("the receipt was sealed with a key this server does not hold (retired from the key file, another deployment's, an ephemeral key of an ended process, or altered)")]
    UnknownKey,
    /// The tag does not match the contents.
    #[error("the receipt's seal does not match its contents; it was altered")]
    BadSeal,
}

/// Why the keys could not be read.
#[derive(Debug, thiserror::Error)]
pub enum KeyFileError {
    /// The file could not be read.
    #[error("reading the receipt key file {path}: {source}")]
    Read {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
        /// The cause.
        source: std::io::Error,
    },
    /// Others may read or write the file, or its group may write it, or its group may read a
    /// file root does not own.
    #[error("the receipt key file {path} has mode {mode:03o} and owner uid {owner}, so {who} may {what} it; allow only its owner (chmod 600), or, for a root-owned file, its group to read (chmod 440)")]
    Exposed {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
        /// Its permission bits.
        mode: u32,
        /// The uid that owns it.
        owner: u32,
        /// Who has too much access: "others" or "its group".
        who: &'static str,
        /// What they may do: "read", "change" or "read and change".
        what: &'static str,
    },
    /// A key is shorter than [`MIN_KEY_BYTES`].
    #[error("line {line} of the receipt key file {path} holds a {bytes}-byte key; a key has at least {MIN_KEY_BYTES} bytes (for example `head -c 32 /dev/urandom | base64`)")]
    ShortKey {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
        /// The line, from 1.
        line: usize,
        /// The key's length.
        bytes: usize,
    },
    /// No key in the file.
    #[error("the receipt key file {path} holds no key; put one key a line, the signing key first")]
    Empty {
        /// The file's path, as given on the command line or in its environment variable.
        path: PathBuf,
    },
    /// The operating system's random source failed.
    #[error("the operating system's random source failed: {0}")]
    Random(String),
}

/// The random source failed while sealing (the request cannot be given receipts).
#[derive(Debug, Clone, thiserror::Error)]
#[error("the operating system's random source failed: {0}")]
pub struct RandomError(String);

thread_local! {
    /// This thread's generator of receipt ids, seeded on first use.
    static IDS: RefCell<Option<StdRng>> = const { RefCell::new(None) };
}

/// Fill `ids` with random bytes from this thread's ChaCha12 generator (a CSPRNG: its output
/// cannot be predicted from earlier ids without its 256-bit seed), seeded once per thread from
/// the operating system's random source. A system call per answer cost about 2% of the server's
/// CPU on the one-observation load; the seeding is the only step that can fail.
fn fill_ids(ids: &mut [u8]) -> Result<(), RandomError> {
    IDS.with_borrow_mut(|generator| {
        let generator = match generator {
            Some(seeded) => seeded,
            None => generator
                .insert(StdRng::try_from_rng(&mut SysRng).map_err(|e| RandomError(e.to_string()))?),
        };
        generator.fill_bytes(ids);
        Ok(())
    })
}

struct Key {
    fingerprint: [u8; FINGERPRINT_BYTES],
    keyed: Seal,
}

impl Key {
    fn new(secret: &[u8]) -> Key {
        let digest = Sha256::new()
            .chain_update(b"ogive receipt key")
            .chain_update(secret)
            .finalize();
        let mut fingerprint = [0; FINGERPRINT_BYTES];
        fingerprint.copy_from_slice(&digest[..FINGERPRINT_BYTES]);
        Key {
            fingerprint,
            // HMAC takes a key of any length, so this cannot fail.
            keyed: Seal::new_from_slice(secret).unwrap_or_else(|_| unreachable!()),
        }
    }
}

/// Where the keys came from.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum KeySource {
    /// A key file.
    File(PathBuf),
    /// Made at start; gone when the process ends.
    Ephemeral,
}

/// The keys that seal and open receipts: the first seals, all open.
pub struct ReceiptKeys {
    keys: Vec<Key>,
    source: KeySource,
}

impl fmt::Debug for ReceiptKeys {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let fingerprints: Vec<String> = self
            .keys
            .iter()
            .map(|k| k.fingerprint.iter().map(|b| format!("{b:02x}")).collect())
            .collect();
        f.debug_struct("ReceiptKeys")
            .field("source", &self.source)
            .field("fingerprints", &fingerprints)
            .finish()
    }
}

impl ReceiptKeys {
    /// The keys of `path`: one a line, the first sealing. Refused if the file's group or others
    /// may read or write it, if a key is short, or if there is none.
    pub fn from_file(path: &Path) -> Result<ReceiptKeys, KeyFileError> {
        let read = |source| KeyFileError::Read {
            path: path.to_path_buf(),
            source,
        };
        refuse_exposed(path, &std::fs::metadata(path).map_err(read)?)?;
        let text = std::fs::read(path).map_err(read)?;
        let mut keys = Vec::new();
        for (i, line) in text.split(|&b| b == b'\n').enumerate() {
            let secret = line.trim_ascii();
            if secret.is_empty() {
                continue;
            }
            if secret.len() < MIN_KEY_BYTES {
                return Err(KeyFileError::ShortKey {
                    path: path.to_path_buf(),
                    line: i + 1,
                    bytes: secret.len(),
                });
            }
            keys.push(Key::new(secret));
        }
        if keys.is_empty() {
            return Err(KeyFileError::Empty {
                path: path.to_path_buf(),
            });
        }
        Ok(ReceiptKeys {
            keys,
            source: KeySource::File(path.to_path_buf()),
        })
    }

    /// A fresh random key of 32 bytes, held only in memory.
    pub fn ephemeral() -> Result<ReceiptKeys, KeyFileError> {
        let mut secret = [0u8; MIN_KEY_BYTES];
        getrandom::fill(&mut secret).map_err(|e| KeyFileError::Random(e.to_string()))?;
        Ok(ReceiptKeys {
            keys: vec![Key::new(&secret)],
            source: KeySource::Ephemeral,
        })
    }

    /// Where the keys came from.
    pub fn source(&self) -> &KeySource {
        &self.source
    }

    /// How many keys open receipts.
    pub fn len(&self) -> usize {
        self.keys.len()
    }

    /// Always false: there is at least one key.
    pub fn is_empty(&self) -> bool {
        self.keys.is_empty()
    }

    /// One receipt per probability, all for `model`'s `version` scored at `scored_at_ms`, with
    /// fresh random ids (from this thread's generator: see `fill_ids`).
    pub fn seal_all(
        &self,
        model: &str,
        version: &str,
        scored_at_ms: u64,
        probabilities: impl ExactSizeIterator<Item = f64>,
    ) -> Result<Vec<String>, RandomError> {
        let mut ids = vec![0u8; ID_BYTES * probabilities.len()];
        fill_ids(&mut ids)?;
        let signing = &self.keys[0];
        let mut bytes = Vec::with_capacity(FIXED_BYTES + 2 + model.len() + version.len() + 32);
        bytes.push(FORMAT);
        bytes.extend_from_slice(&signing.fingerprint);
        bytes.extend_from_slice(&[0; ID_BYTES]);
        bytes.extend_from_slice(&scored_at_ms.to_be_bytes());
        bytes.extend_from_slice(&[0; 8]);
        push_label(&mut bytes, model);
        push_label(&mut bytes, version);
        let body = bytes.len();
        let receipts = probabilities
            .zip(ids.chunks_exact(ID_BYTES))
            .map(|(probability, id)| {
                bytes.truncate(body);
                bytes[5..5 + ID_BYTES].copy_from_slice(id);
                bytes[29..37].copy_from_slice(&probability.to_bits().to_be_bytes());
                let tag = signing.keyed.clone().chain_update(&bytes).finalize();
                bytes.extend_from_slice(&tag.into_bytes()[..TAG_BYTES]);
                URL_SAFE_NO_PAD.encode(&bytes)
            })
            .collect();
        Ok(receipts)
    }

    /// Check `token`'s seal with the key its fingerprint names and read it.
    pub fn open(&self, token: &str) -> Result<Receipt, ReceiptError> {
        if token.len() > MAX_RECEIPT_CHARS {
            return Err(ReceiptError::WrongLength(token.len() / 4 * 3));
        }
        let bytes = URL_SAFE_NO_PAD
            .decode(token)
            .map_err(|_| ReceiptError::NotBase64)?;
        if bytes.len() < SHORTEST {
            return Err(ReceiptError::WrongLength(bytes.len()));
        }
        if bytes[0] != FORMAT {
            return Err(ReceiptError::UnknownFormat(bytes[0]));
        }
        let key = self
            .keys
            .iter()
            .find(|k| k.fingerprint[..] == bytes[1..1 + FINGERPRINT_BYTES])
            .ok_or(ReceiptError::UnknownKey)?;
        let (sealed, tag) = bytes.split_at(bytes.len() - TAG_BYTES);
        key.keyed
            .clone()
            .chain_update(sealed)
            .verify_truncated_left(tag)
            .map_err(|_| ReceiptError::BadSeal)?;
        read_sealed(sealed).ok_or(ReceiptError::WrongLength(bytes.len()))
    }
}

/// Refuse a key file that others may read or write, that its group may write, or that its
/// group may read when root does not own it.
#[cfg(unix)]
fn refuse_exposed(path: &Path, metadata: &std::fs::Metadata) -> Result<(), KeyFileError> {
    use std::os::unix::fs::MetadataExt;
    let mode = metadata.mode() & 0o777;
    let owner = metadata.uid();
    match exposure(mode, owner) {
        None => Ok(()),
        Some((who, what)) => Err(KeyFileError::Exposed {
            path: path.to_path_buf(),
            mode,
            owner,
            who,
            what,
        }),
    }
}

/// Who may do too much with a key file of permission bits `mode` owned by uid `owner`, and
/// what: `None` when only its owner, or the group of a root-owned file, may read it.
fn exposure(mode: u32, owner: u32) -> Option<(&'static str, &'static str)> {
    let access = |bits: u32| match (bits & 0o4 != 0, bits & 0o2 != 0) {
        (true, true) => Some("read and change"),
        (true, false) => Some("read"),
        (false, true) => Some("change"),
        (false, false) => None,
    };
    if let Some(what) = access(mode & 0o7) {
        return Some(("others", what));
    }
    let group = (mode >> 3) & 0o7;
    if group & 0o2 != 0 || (group & 0o4 != 0 && owner != 0) {
        return access(group).map(|what| ("its group", what));
    }
    None
}

#[cfg(not(unix))]
fn refuse_exposed(_path: &Path, _metadata: &std::fs::Metadata) -> Result<(), KeyFileError> {
    Ok(())
}

/// A length byte and the label's bytes (model names and version labels are at most 64 bytes
/// by their naming rules; longer text is cut at 255 bytes, which no valid label reaches).
fn push_label(bytes: &mut Vec<u8>, label: &str) {
    let kept = &label.as_bytes()[..label.len().min(255)];
    bytes.push(kept.len() as u8);
    bytes.extend_from_slice(kept);
}

/// The fields of bytes whose seal has been checked; `None` if they do not fill the layout.
fn read_sealed(sealed: &[u8]) -> Option<Receipt> {
    let mut id = [0u8; ID_BYTES];
    id.copy_from_slice(sealed.get(5..5 + ID_BYTES)?);
    let scored_at_ms = u64::from_be_bytes(sealed.get(21..29)?.try_into().ok()?);
    let probability = f64::from_bits(u64::from_be_bytes(sealed.get(29..37)?.try_into().ok()?));
    let (model, rest) = read_label(sealed.get(FIXED_BYTES..)?)?;
    let (version, rest) = read_label(rest)?;
    if !rest.is_empty() {
        return None;
    }
    Some(Receipt {
        id: ReceiptId(id),
        model,
        version,
        probability,
        scored_at_ms,
    })
}

fn read_label(bytes: &[u8]) -> Option<(String, &[u8])> {
    let (&length, rest) = bytes.split_first()?;
    let (label, rest) = rest.split_at_checked(usize::from(length))?;
    Some((String::from_utf8(label.to_vec()).ok()?, rest))
}

/// Milliseconds since the Unix epoch now.
pub fn now_ms() -> u64 {
    SystemTime::now()
        .duration_since(UNIX_EPOCH)
        .map_or(0, |d| u64::try_from(d.as_millis()).unwrap_or(u64::MAX))
}

/// A maximum age written as a whole number and a unit: `400d`, `36h`, `90m`, `30s`.
pub fn parse_max_age(text: &str) -> Result<Duration, String> {
    let text = text.trim();
    let split = text
        .find(|c: char| !c.is_ascii_digit())
        .ok_or_else(|| format!("'{text}' needs a unit: d, h, m or s (for example 400d)"))?;
    let (number, unit) = text.split_at(split);
    let amount: u64 = number
        .parse()
        .map_err(|_| format!("'{text}' starts with no whole number (for example 400d)"))?;
    let seconds_per = match unit {
        "d" => 86_400,
        "h" => 3_600,
        "m" => 60,
        "s" => 1,
        other => {
            return Err(format!(
                "'{other}' is not a unit of a maximum age: d, h, m or s"
            ))
        }
    };
    if amount == 0 {
        return Err(format!(
            "a maximum age of '{text}' would refuse every receipt"
        ));
    }
    amount
        .checked_mul(seconds_per)
        .map(Duration::from_secs)
        .ok_or_else(|| format!("'{text}' is too long a time"))
}

/// A duration in days, as the refusals and the docs state ages (one decimal).
pub fn days(duration: Duration) -> String {
    format!("{:.1}", duration.as_secs_f64() / 86_400.0)
}

#[cfg(test)]
mod tests {
    use super::*;

    fn keys_of(lines: &str) -> (tempfile::TempDir, std::io::Result<PathBuf>) {
        let dir = tempfile::tempdir().expect("temp dir");
        let path = dir.path().join("keys");
        let written = std::fs::write(&path, lines).map(|()| path.clone());
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let _ = std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o600));
        }
        (dir, written)
    }

    const KEY_A: &str = "aaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaaa";
    const KEY_B: &str = "bbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbbb";

    #[test]
    fn a_sealed_receipt_opens_to_exactly_what_was_sealed() {
        let keys = ReceiptKeys::ephemeral().expect("random key");
        let p = 0.123_456_789_012_345_67_f64;
        let sealed = keys
            .seal_all(
                "lease-arrears",
                "1.0.0",
                1_700_000_000_123,
                [p, 1e-300].into_iter(),
            )
            .expect("sealed");
        assert_eq!(sealed.len(), 2);
        assert_ne!(sealed[0], sealed[1]);
        let opened = keys.open(&sealed[0]).expect("opens");
        assert_eq!(opened.model(), "lease-arrears");
        assert_eq!(opened.version(), "1.0.0");
        assert_eq!(opened.probability().to_bits(), p.to_bits());
        assert_eq!(opened.scored_at_ms(), 1_700_000_000_123);
        assert_eq!(keys.open(&sealed[1]).map(|r| r.probability()), Ok(1e-300));
        assert!(sealed[0].len() <= MAX_RECEIPT_CHARS);
        assert!(sealed[0]
            .bytes()
            .all(|b| b.is_ascii_alphanumeric() || b == b'-' || b == b'_'));
    }

    #[test]
    fn receipt_ids_never_repeat_within_a_thread_or_across_threads() {
        let keys = ReceiptKeys::ephemeral().expect("random key");
        let ids = |keys: &ReceiptKeys| -> Vec<[u8; ID_BYTES]> {
            (0..200)
                .flat_map(|i| {
                    let sealed = keys
                        .seal_all("m", "1", i, [0.5, 0.5].into_iter())
                        .expect("sealed");
                    sealed
                        .into_iter()
                        .map(|token| *keys.open(&token).expect("opens").id().as_bytes())
                })
                .collect()
        };
        let mut all = ids(&keys);
        all.extend(std::thread::scope(|scope| {
            let other = scope.spawn(|| ids(&keys));
            other.join().expect("the other thread sealed")
        }));
        let count = all.len();
        all.sort_unstable();
        all.dedup();
        assert_eq!(all.len(), count, "every receipt id is new");
    }

    #[test]
    fn changing_any_byte_breaks_the_receipt() {
        let keys = ReceiptKeys::ephemeral().expect("random key");
        let sealed = keys
            .seal_all("m", "1", 42, [0.5].into_iter())
            .expect("sealed")
            .remove(0);
        let raw = URL_SAFE_NO_PAD.decode(&sealed).expect("base64");
        for i in 0..raw.len() {
            for flip in [0x01u8, 0x80] {
                let mut altered = raw.clone();
                altered[i] ^= flip;
                let token = URL_SAFE_NO_PAD.encode(&altered);
                assert!(
                    keys.open(&token).is_err(),
                    "byte {i} flipped by {flip:#x} still opens"
                );
            }
        }
        // Every character of the text too (a changed character may also stop being base64).
        for i in 0..sealed.len() {
            let mut text = sealed.clone().into_bytes();
            text[i] = if text[i] == b'A' { b'B' } else { b'A' };
            let token = String::from_utf8(text).expect("ascii");
            assert!(
                keys.open(&token).is_err(),
                "character {i} changed still opens"
            );
        }
    }

    #[test]
    fn the_first_key_seals_and_every_key_opens() {
        let (_dir, old) = keys_of(&format!("{KEY_A}\n"));
        let old = ReceiptKeys::from_file(&old.expect("written")).expect("keys");
        let (_dir2, rotated) = keys_of(&format!("{KEY_B}\n\n{KEY_A}\n"));
        let rotated = ReceiptKeys::from_file(&rotated.expect("written")).expect("keys");
        let (_dir3, retired) = keys_of(&format!("{KEY_B}\n"));
        let retired = ReceiptKeys::from_file(&retired.expect("written")).expect("keys");
        assert_eq!(rotated.len(), 2);
        let before = old
            .seal_all("m", "1", 1, [0.25].into_iter())
            .expect("sealed");
        let after = rotated
            .seal_all("m", "1", 2, [0.75].into_iter())
            .expect("sealed");
        assert_eq!(rotated.open(&before[0]).map(|r| r.probability()), Ok(0.25));
        assert_eq!(retired.open(&after[0]).map(|r| r.probability()), Ok(0.75));
        assert_eq!(retired.open(&before[0]), Err(ReceiptError::UnknownKey));
        assert_eq!(old.open(&after[0]), Err(ReceiptError::UnknownKey));
    }

    #[test]
    fn key_files_are_refused_when_exposed_short_or_empty() {
        let (_dir, short) = keys_of("too-short\n");
        let short = short.expect("written");
        assert!(matches!(
            ReceiptKeys::from_file(&short),
            Err(KeyFileError::ShortKey {
                line: 1,
                bytes: 9,
                ..
            })
        ));
        let (_dir2, empty) = keys_of("\n\n");
        assert!(matches!(
            ReceiptKeys::from_file(&empty.expect("written")),
            Err(KeyFileError::Empty { .. })
        ));
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let (_dir3, open) = keys_of(&format!("{KEY_A}\n"));
            let open = open.expect("written");
            std::fs::set_permissions(&open, std::fs::Permissions::from_mode(0o644)).expect("chmod");
            let refused = ReceiptKeys::from_file(&open);
            assert!(
                matches!(
                    refused,
                    Err(KeyFileError::Exposed {
                        mode: 0o644,
                        who: "others",
                        ..
                    })
                ),
                "{refused:?}"
            );
        }
    }

    #[test]
    fn only_a_root_owned_key_file_may_be_read_by_its_group() {
        // Owner-only modes, and the Kubernetes Secret of a pod with an fsGroup (root, 0440).
        for (mode, owner) in [
            (0o600, 1000),
            (0o400, 1000),
            (0o600, 0),
            (0o440, 0),
            (0o640, 0),
        ] {
            assert_eq!(exposure(mode, owner), None, "{mode:03o} owned by {owner}");
        }
        assert_eq!(exposure(0o640, 1000), Some(("its group", "read")));
        assert_eq!(exposure(0o440, 65532), Some(("its group", "read")));
        assert_eq!(exposure(0o660, 0), Some(("its group", "read and change")));
        assert_eq!(exposure(0o620, 0), Some(("its group", "change")));
        assert_eq!(exposure(0o604, 0), Some(("others", "read")));
        assert_eq!(exposure(0o442, 0), Some(("others", "change")));
        assert_eq!(exposure(0o446, 1000), Some(("others", "read and change")));
    }

    #[test]
    fn the_keys_never_show_in_debug_output() {
        let (_dir, path) = keys_of(&format!("{KEY_A}\n"));
        let keys = ReceiptKeys::from_file(&path.expect("written")).expect("keys");
        let shown = format!("{keys:?}");
        assert!(!shown.contains("aaaa"), "{shown}");
        assert!(shown.contains("fingerprints"), "{shown}");
    }

    #[test]
    fn maximum_ages_read_with_their_units() {
        assert_eq!(parse_max_age("400d"), Ok(DEFAULT_MAX_AGE));
        assert_eq!(parse_max_age("36h"), Ok(Duration::from_secs(36 * 3600)));
        assert_eq!(parse_max_age("90m"), Ok(Duration::from_secs(5400)));
        assert_eq!(parse_max_age("30s"), Ok(Duration::from_secs(30)));
        for bad in ["400", "d", "0d", "4w", "-1d", "1.5d"] {
            assert!(parse_max_age(bad).is_err(), "{bad} was taken");
        }
    }
}
