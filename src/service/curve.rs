//! The curve of one covariate, for dashboards: probability and that covariate's marginal effect
//! along a grid, the other covariates held at given values or at the training means.
//!
//! ```text
//! GET /models/{name}/curve?over=COVARIATE[&points=N][&from=X][&to=X][&level=L][&OTHER=VALUE]...
//!
//! continuous, count   N points from `from` to `to` (default: the training range), clipped to the
//!                     covariate's domain (counts ≥ 0 and whole, log terms ≥ 1e-12, |x| ≤ 1e12);
//!                     count points are rounded and repeated ones dropped
//! binary              the points 0 and 1; the effect is the discrete change
//! categorical         one point per level; the effect is P(level) − P(reference)
//! ```
//!
//! `from` above `to` is refused (422 naming `from`), as is any parameter given twice (400). A
//! value given for `over` itself is checked and then not used (the answer says so). The
//! reserved parameter names (`over`, `points`, `from`, `to`, `level`) win over covariates of
//! the same name. The answer's ETag depends only on the model's name and live version
//! ([`etag`]), so a dashboard's cached curve stays valid until a promotion.

use serde::ser::SerializeMap;
use serde::{Serialize, Serializer};

use super::dto::{parse_level, IntervalView};
use super::observations::{check_bounds, MAX_MAGNITUDE, MIN_LOG_ARGUMENT};
use super::problem::{echo, echo_number, observation_detail, Kind, Problem};
use crate::engine::{Answer, EffectKind, Interval, Options, Scorer};
use crate::model::{CovariateKind, Model, Value};

/// Query parameters that are not covariates.
pub const RESERVED: [&str; 5] = ["over", "points", "from", "to", "level"];
/// Points on a numeric curve when `points` is not given.
pub const DEFAULT_POINTS: usize = 50;

/// A checked curve request.
#[derive(Debug, Clone)]
pub struct CurveRequest {
    /// The covariate the curve runs along.
    pub over: usize,
    /// The grid values of `over`.
    pub grid: Vec<Value>,
    /// The values of every covariate (`over`'s slot is replaced along the grid).
    pub held: Vec<Value>,
    /// Which covariates were given in the query.
    pub given: Vec<bool>,
    /// Engine options (level).
    pub options: Options,
    /// The numeric range actually used, for numeric covariates.
    pub range: Option<(f64, f64)>,
    /// Whether the requested range had to be clipped to the covariate's domain.
    pub clipped: bool,
    /// Whether the query also gave a value for `over` (checked, then not used).
    pub ignored_over: bool,
}

fn number(name: &str, text: &str) -> Result<f64, Problem> {
    let x: f64 = text.trim().parse().map_err(|_| {
        Problem::new(
            Kind::InvalidQuery,
            format!("'{name}' must be a number, got {}", echo(text)),
        )
        .parameter(name)
    })?;
    if !x.is_finite() {
        return Err(Problem::new(
            Kind::NonFinite,
            format!("'{name}' must be finite, got {}", echo(text)),
        )
        .parameter(name));
    }
    Ok(x)
}

/// The refusal of a range that runs downwards; a missing end is the training range's.
fn descending(from: Option<f64>, to: Option<f64>, low: f64, high: f64) -> Problem {
    let end = |given: Option<f64>, value: f64| match given {
        Some(_) => echo_number(value),
        None => format!("{} (the training range's end)", echo_number(value)),
    };
    Problem::new(
        Kind::InvalidOption,
        format!(
            "'from' is {}, above 'to' at {}; a curve runs from the lower value to the higher",
            end(from, low),
            end(to, high)
        ),
    )
    .parameter(if from.is_some() { "from" } else { "to" })
}

/// Read and check the query of a curve request, in named steps: the parameter names, the
/// covariate to run along, the grid options, the held values, a check of those values by the
/// model's own rules, and the grid.
pub fn parse_curve_request(
    model: &Model,
    pairs: &[(String, String)],
    max_points: usize,
) -> Result<CurveRequest, Problem> {
    check_names(model, pairs)?;
    let get = |name: &str| {
        pairs
            .iter()
            .find(|(k, _)| k == name)
            .map(|(_, v)| v.as_str())
    };
    let over = over_covariate(model, get("over"))?;
    let points = points(get("points"), max_points)?;
    let level = match get("level") {
        None => 0.95,
        Some(text) => number("level", text)?,
    };
    let mut options = parse_level(level).map_err(|p| p.parameter("level"))?;
    options.contributions = false;
    let from = bounded_end("from", get("from"))?;
    let to = bounded_end("to", get("to"))?;
    let held = held_values(model, pairs, over)?;
    check_held(model, &held, over)?;
    let (grid, range, clipped) = grid(model, over, from, to, points)?;
    Ok(CurveRequest {
        over,
        grid,
        held: held.values,
        given: held.given,
        options,
        range,
        clipped,
        ignored_over: held.over_value.is_some(),
    })
}

/// Step 1: every parameter is given once, and is a curve parameter or a covariate.
fn check_names(model: &Model, pairs: &[(String, String)]) -> Result<(), Problem> {
    for (i, (key, _)) in pairs.iter().enumerate() {
        if pairs[..i].iter().any(|(k, _)| k == key) {
            return Err(Problem::new(
                Kind::InvalidQuery,
                format!(
                    "{} is given more than once; give each parameter once",
                    echo(key)
                ),
            )
            .parameter(key.as_str()));
        }
        if !RESERVED.contains(&key.as_str()) && model.covariate_index(key).is_none() {
            return Err(Problem::new(
                Kind::UnknownField,
                format!(
                    "{} is neither a curve parameter ({}) nor a covariate of {}",
                    echo(key),
                    RESERVED.join(", "),
                    model.name()
                ),
            )
            .parameter(key.as_str()));
        }
    }
    Ok(())
}

/// Step 2: `over` names a covariate of the model.
fn over_covariate(model: &Model, over: Option<&str>) -> Result<usize, Problem> {
    let over_name = over.ok_or_else(|| {
        Problem::new(
            Kind::MissingCovariate,
            "name the covariate the curve runs along with 'over'",
        )
        .parameter("over")
    })?;
    model.covariate_index(over_name).ok_or_else(|| {
        Problem::new(
            Kind::UnknownField,
            format!(
                "'over' is {}, which is not a covariate of {}",
                echo(over_name),
                model.name()
            ),
        )
        .parameter("over")
    })
}

/// Step 3: `points`, a whole number from 2 to `max_points` ([`DEFAULT_POINTS`] if not given).
fn points(text: Option<&str>, max_points: usize) -> Result<usize, Problem> {
    let Some(text) = text else {
        return Ok(DEFAULT_POINTS);
    };
    let n: i64 = text.trim().parse().map_err(|_| {
        Problem::new(
            Kind::InvalidQuery,
            format!("'points' must be a whole number, got {}", echo(text)),
        )
        .parameter("points")
    })?;
    if n < 2 || n > max_points as i64 {
        return Err(Problem::new(
            Kind::InvalidOption,
            format!("'points' must lie between 2 and {max_points}, got {n}"),
        )
        .parameter("points"));
    }
    Ok(n as usize)
}

/// Step 3 too: an end of the range (`from`, `to`), a finite number within the service's bounds.
fn bounded_end(name: &str, text: Option<&str>) -> Result<Option<f64>, Problem> {
    let x = text.map(|t| number(name, t)).transpose()?;
    if x.is_some_and(|x| x.abs() > MAX_MAGNITUDE) {
        return Err(Problem::new(
            Kind::OutsideDomain,
            format!("'{name}' must lie within ±{MAX_MAGNITUDE:e}"),
        )
        .parameter(name));
    }
    Ok(x)
}

/// The covariate values a curve holds, and which of them the query gave.
struct HeldValues {
    /// Every covariate's value: given, or the training-mean profile's.
    values: Vec<Value>,
    /// Which covariates the query gave (`over` excluded).
    given: Vec<bool>,
    /// A value the query gave for `over` itself: checked, then not used.
    over_value: Option<Value>,
}

/// Step 4: the held values, each given one parsed by the model's rules for its kind.
fn held_values(
    model: &Model,
    pairs: &[(String, String)],
    over: usize,
) -> Result<HeldValues, Problem> {
    let mut held = HeldValues {
        values: model.mean_profile.clone(),
        given: vec![false; model.covariates.len()],
        over_value: None,
    };
    for (key, text) in pairs {
        if RESERVED.contains(&key.as_str()) {
            continue;
        }
        let Some(j) = model.covariate_index(key) else {
            continue;
        };
        let covariate = &model.covariates[j];
        if covariate.kind == CovariateKind::Binary && !matches!(text.trim(), "0" | "1") {
            return Err(Problem::new(
                Kind::NotBinary,
                format!("'{key}' is binary: send 0 or 1, got {}", echo(text)),
            )
            .parameter(key.as_str()));
        }
        let value = model.parse_text_value(j, text).map_err(|e| {
            Problem::new(Kind::of_observation(&e), observation_detail(&e, None))
                .parameter(key.as_str())
        })?;
        if j == over {
            held.over_value = Some(value);
        } else {
            held.given[j] = true;
            held.values[j] = value;
        }
    }
    Ok(held)
}

/// Step 5: check the given values with the model's own rules: a probe at valid defaults
/// (counts at whole numbers) differs from a valid observation only where the caller gave
/// values.
fn check_held(model: &Model, held: &HeldValues, over: usize) -> Result<(), Problem> {
    let mut probe = held.values.clone();
    for (j, c) in model.covariates.iter().enumerate() {
        if !held.given[j] {
            probe[j] = match c.kind {
                CovariateKind::Categorical => Value::Level(c.reference),
                CovariateKind::Count => Value::Number(c.training_mean.round()),
                CovariateKind::Binary => Value::Number(c.training_mean.round()),
                CovariateKind::Continuous => Value::Number(c.training_mean),
            };
        }
    }
    probe[over] = held
        .over_value
        .unwrap_or(match model.covariates[over].kind {
            CovariateKind::Categorical => Value::Level(model.covariates[over].reference),
            _ => Value::Number(model.covariates[over].training_mean.round().max(1.0)),
        });
    if let Err(e) = model.check_values(&probe) {
        return Err(
            Problem::new(Kind::of_observation(&e), observation_detail(&e, None))
                .parameter(e.field()),
        );
    }
    if let Err((j, problem)) = check_bounds(model, &probe) {
        return Err(problem.parameter(model.covariates[j].name.as_str()));
    }
    Ok(())
}

/// The grid values, the numeric range actually used, and whether it was clipped.
type Grid = (Vec<Value>, Option<(f64, f64)>, bool);

/// Step 6: the grid of `over`: its levels, 0 and 1, or `points` values from `from` to `to`
/// (default: the training range), clipped to the covariate's domain.
fn grid(
    model: &Model,
    over: usize,
    from: Option<f64>,
    to: Option<f64>,
    points: usize,
) -> Result<Grid, Problem> {
    let covariate = &model.covariates[over];
    match covariate.kind {
        CovariateKind::Categorical => Ok((
            (0..covariate.levels.len()).map(Value::Level).collect(),
            None,
            false,
        )),
        CovariateKind::Binary => Ok((vec![Value::Number(0.0), Value::Number(1.0)], None, false)),
        CovariateKind::Continuous | CovariateKind::Count => {
            let has_log = model.log_terms.iter().any(|&(_, c)| c == over);
            let low = if has_log {
                MIN_LOG_ARGUMENT
            } else if covariate.kind == CovariateKind::Count {
                0.0
            } else {
                -MAX_MAGNITUDE
            };
            let clip = |x: f64| x.clamp(low, MAX_MAGNITUDE);
            let asked_from = from.unwrap_or(covariate.training_min);
            let asked_to = to.unwrap_or(covariate.training_max);
            if asked_from > asked_to {
                return Err(descending(from, to, asked_from, asked_to));
            }
            let (a, b) = (clip(asked_from), clip(asked_to));
            let clipped = a != asked_from || b != asked_to;
            let mut grid: Vec<Value> = Vec::with_capacity(points);
            for i in 0..points {
                // The last point is `b` itself: a + (b − a)·1 can round past it (to 0 for
                // a = 1e12, b = 1e-12, which a log term cannot take).
                let t = i as f64 / (points - 1) as f64;
                let mut x = if i + 1 == points {
                    b
                } else {
                    clip(a + (b - a) * t)
                };
                if covariate.kind == CovariateKind::Count {
                    x = x.round().clamp(0.0, MAX_MAGNITUDE);
                }
                if grid.last() != Some(&Value::Number(x)) {
                    grid.push(Value::Number(x));
                }
            }
            Ok((grid, Some((a, b)), clipped))
        }
    }
}

/// One point of a curve.
#[derive(Debug, Clone, PartialEq)]
pub struct CurvePoint {
    /// The value of `over`.
    pub value: Value,
    /// The answer there (probability, its interval, the effects).
    pub answer: Answer,
    /// The effect of `over` at this point, with its standard error and interval.
    pub effect: (f64, Option<f64>, Option<Interval>),
    /// Whether the value lies outside the training range of `over`.
    pub outside_training_range: bool,
}

/// The computed curve.
#[derive(Debug, Clone)]
pub struct Curve<'a> {
    pub model: &'a Model,
    pub request: CurveRequest,
    pub points: Vec<CurvePoint>,
}

/// Compute a curve with the engine.
pub fn compute(model: &Model, request: CurveRequest) -> Result<Curve<'_>, Problem> {
    let mut scorer = Scorer::new(model);
    let mut values = request.held.clone();
    let covariate = &model.covariates[request.over];
    let mut points = Vec::with_capacity(request.grid.len());
    for &x in &request.grid {
        values[request.over] = x;
        let answer = scorer.score(model, &values, &request.options);
        let effect = match (x, covariate.kind) {
            (Value::Level(l), _) if l == covariate.reference => (
                0.0,
                answer.std_error.map(|_| 0.0),
                answer.interval.map(|_| Interval {
                    lower: 0.0,
                    upper: 0.0,
                }),
            ),
            _ => answer
                .effects
                .iter()
                .find(|e| {
                    e.slot.covariate == request.over
                        && (e.slot.kind != EffectKind::LevelChange
                            || Value::Level(e.slot.level.unwrap_or(usize::MAX)) == x)
                })
                .map(|e| (e.effect, e.std_error, e.interval))
                .unwrap_or((0.0, None, None)),
        };
        if !super::scoring::is_finite(answer) {
            return Err(Problem::new(
                Kind::NotComputable,
                "the curve overflows to a non-finite number at these values",
            ));
        }
        let outside_training_range = match x {
            Value::Number(v) => v < covariate.training_min || v > covariate.training_max,
            _ => false,
        };
        points.push(CurvePoint {
            value: x,
            answer: answer.clone(),
            effect,
            outside_training_range,
        });
    }
    Ok(Curve {
        model,
        request,
        points,
    })
}

/// The strong ETag of a model version's curves: FNV-1a (64 bit) of `name NUL version`. It is
/// the same on every replica and every build, and changes only when the live version changes.
pub fn etag(model: &Model) -> String {
    let mut hash: u64 = 0xcbf2_9ce4_8422_2325;
    for byte in model
        .name()
        .bytes()
        .chain(std::iter::once(0))
        .chain(model.version().bytes())
    {
        hash ^= u64::from(byte);
        hash = hash.wrapping_mul(0x0000_0100_0000_01b3);
    }
    format!("\"{hash:016x}\"")
}

struct ValueView<'a>(&'a Model, usize, Value);

impl Serialize for ValueView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        match self.2 {
            Value::Number(x) => serializer.serialize_f64(x),
            Value::Level(l) => serializer.serialize_str(&self.0.covariates[self.1].levels[l]),
            Value::Shares => serializer.serialize_none(),
        }
    }
}

struct Held<'a>(&'a Curve<'a>);

impl Serialize for Held<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let curve = self.0;
        let model = curve.model;
        let mut map = serializer.serialize_map(None)?;
        for (j, c) in model.covariates.iter().enumerate() {
            if j == curve.request.over {
                continue;
            }
            let value = curve.request.held[j];
            let source = match (curve.request.given[j], value) {
                (true, _) => "given",
                (false, Value::Shares) => "training_shares",
                (false, _) => "training_mean",
            };
            map.serialize_entry(
                &c.name,
                &HeldValue {
                    value: (value != Value::Shares).then_some(ValueView(model, j, value)),
                    source,
                },
            )?;
        }
        map.end()
    }
}

#[derive(Serialize)]
struct HeldValue<'a> {
    #[serde(skip_serializing_if = "Option::is_none")]
    value: Option<ValueView<'a>>,
    source: &'static str,
}

struct PointView<'a> {
    curve: &'a Curve<'a>,
    point: &'a CurvePoint,
}

impl Serialize for PointView<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let level = self.curve.request.options.level();
        let p = self.point;
        let mut map = serializer.serialize_map(None)?;
        map.serialize_entry(
            "value",
            &ValueView(self.curve.model, self.curve.request.over, p.value),
        )?;
        map.serialize_entry("probability", &p.answer.probability)?;
        if let Some(se) = p.answer.std_error {
            map.serialize_entry("std_error", &se)?;
        }
        if let Some(i) = p.answer.interval {
            map.serialize_entry("interval", &IntervalView::new(i, level))?;
        }
        map.serialize_entry("linear_index", &p.answer.linear_index)?;
        map.serialize_entry("effect", &p.effect.0)?;
        if let Some(se) = p.effect.1 {
            map.serialize_entry("effect_std_error", &se)?;
        }
        if let Some(i) = p.effect.2 {
            map.serialize_entry("effect_interval", &IntervalView::new(i, level))?;
        }
        map.serialize_entry("outside_training_range", &p.outside_training_range)?;
        map.end()
    }
}

impl Serialize for Curve<'_> {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        let model = self.model;
        let covariate = &model.covariates[self.request.over];
        let effect_kind = match covariate.kind {
            CovariateKind::Continuous | CovariateKind::Count => EffectKind::Derivative,
            CovariateKind::Binary => EffectKind::DiscreteChange,
            CovariateKind::Categorical => EffectKind::LevelChange,
        };
        let mut map = serializer.serialize_map(None)?;
        map.serialize_entry("model", model.name())?;
        map.serialize_entry("version", model.version())?;
        map.serialize_entry("link", model.link.name())?;
        map.serialize_entry("over", &covariate.name)?;
        map.serialize_entry("kind", covariate.kind.name())?;
        map.serialize_entry("effect_kind", effect_kind.name())?;
        if covariate.kind == CovariateKind::Categorical {
            map.serialize_entry("reference", &covariate.levels[covariate.reference])?;
        }
        map.serialize_entry("level", &self.request.options.level())?;
        if let Some((from, to)) = self.request.range {
            map.serialize_entry("from", &from)?;
            map.serialize_entry("to", &to)?;
        }
        map.serialize_entry("held", &Held(self))?;
        let points: Vec<PointView> = self
            .points
            .iter()
            .map(|point| PointView { curve: self, point })
            .collect();
        map.serialize_entry("points", &points)?;
        let mut notes: Vec<&str> = Vec::new();
        if self.request.clipped {
            notes.push("the requested range was clipped to the covariate's domain");
        }
        if self.request.ignored_over {
            notes.push("the value given for the covariate the curve runs along is not used");
        }
        if model.covariance.is_none() {
            notes.push("this model version has no coefficient covariance, so the curve carries no standard errors or intervals");
        }
        map.serialize_entry("notes", &notes)?;
        map.end()
    }
}
