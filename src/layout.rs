//! The posterior value format (version 1): one Arrow struct shape per family.
//! Field names identify the family, so every reader and transform serves all of
//! them; a prior is the same shape with zero evidence.
//!
//! | family    | fields (Float64 unless noted)                                   |
//! |-----------|-----------------------------------------------------------------|
//! | Beta      | a0, b0, successes, trials                                       |
//! | Gamma     | shape0, rate0, events, exposure                                 |
//! | NIG       | mu0, kappa0, alpha0, beta0, n, mean, m2                         |
//! | Dirichlet | classes: List<Utf8>, a0: List<Float64>, counts: List<Float64>   |

use std::sync::Arc;

use datafusion::arrow::array::{
    Array, ArrayRef, AsArray, Float64Array, Float64Builder, ListArray, ListBuilder, StringBuilder,
    StructArray,
};
use datafusion::arrow::buffer::NullBuffer;
use datafusion::arrow::compute::cast;
use datafusion::arrow::datatypes::{DataType, Field, Fields};
use datafusion::common::{exec_datafusion_err, plan_err, Result};

use crate::family::compensated::Dd;
use crate::family::{
    BetaPosterior, BetaPrior, Conjugate, DirichletPosterior, DirichletPrior, FamilyError,
    GammaPosterior, GammaPrior, Marginal, NigPosterior, NigPrior,
};

pub const BETA_FIELDS: [&str; 4] = ["a0", "b0", "successes", "trials"];
pub const GAMMA_FIELDS: [&str; 4] = ["shape0", "rate0", "events", "exposure"];
pub const NIG_FIELDS: [&str; 7] = ["mu0", "kappa0", "alpha0", "beta0", "n", "mean", "m2"];
pub const DIRICHLET_FIELDS: [&str; 3] = ["classes", "a0", "counts"];

/// The shapes a posterior argument may have, for error messages.
pub const ACCEPTED_SHAPES: &str = "a posterior struct: Beta {a0, b0, successes, trials}, \
Gamma {shape0, rate0, events, exposure}, Normal-Inverse-Gamma {mu0, kappa0, alpha0, beta0, n, \
mean, m2} or Dirichlet {classes, a0, counts}";

/// The four conjugate families.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Kind {
    Beta,
    Gamma,
    Nig,
    Dirichlet,
}

impl Kind {
    /// The family's short name, as written in options and bundles: `beta`, `gamma`,
    /// `nig`, `dirichlet`.
    /// The family of a short name (`beta`, `gamma`, `nig`, `dirichlet`).
    pub fn from_short_name(name: &str) -> Option<Kind> {
        [Kind::Beta, Kind::Gamma, Kind::Nig, Kind::Dirichlet]
            .into_iter()
            .find(|k| k.short_name().eq_ignore_ascii_case(name.trim()))
    }

    pub fn short_name(self) -> &'static str {
        match self {
            Kind::Beta => "beta",
            Kind::Gamma => "gamma",
            Kind::Nig => "nig",
            Kind::Dirichlet => "dirichlet",
        }
    }

    pub fn name(self) -> &'static str {
        match self {
            Kind::Beta => "Beta",
            Kind::Gamma => "Gamma",
            Kind::Nig => "Normal-Inverse-Gamma",
            Kind::Dirichlet => "Dirichlet",
        }
    }

    /// The canonical Arrow type of this family's posterior. Built once per family:
    /// a running window asks for it for every row it evaluates.
    pub fn data_type(self) -> DataType {
        use std::sync::OnceLock;
        static TYPES: [OnceLock<DataType>; 4] = [const { OnceLock::new() }; 4];
        let cell = match self {
            Kind::Beta => &TYPES[0],
            Kind::Gamma => &TYPES[1],
            Kind::Nig => &TYPES[2],
            Kind::Dirichlet => &TYPES[3],
        };
        cell.get_or_init(|| self.build_data_type()).clone()
    }

    fn build_data_type(self) -> DataType {
        let float_fields = |names: &[&str]| {
            Fields::from(
                names
                    .iter()
                    .map(|n| Field::new(*n, DataType::Float64, true))
                    .collect::<Vec<_>>(),
            )
        };
        match self {
            Kind::Beta => DataType::Struct(float_fields(&BETA_FIELDS)),
            Kind::Gamma => DataType::Struct(float_fields(&GAMMA_FIELDS)),
            Kind::Nig => DataType::Struct(float_fields(&NIG_FIELDS)),
            Kind::Dirichlet => DataType::Struct(Fields::from(vec![
                Field::new("classes", list_of(DataType::Utf8), true),
                Field::new("a0", list_of(DataType::Float64), true),
                Field::new("counts", list_of(DataType::Float64), true),
            ])),
        }
    }

    /// Recognise a family from a struct's field names (order and extra fields ignored).
    pub fn detect(data_type: &DataType) -> Option<Kind> {
        let DataType::Struct(fields) = data_type else {
            return None;
        };
        let has = |names: &[&str]| names.iter().all(|n| fields.find(n).is_some());
        if has(&NIG_FIELDS) {
            Some(Kind::Nig)
        } else if has(&DIRICHLET_FIELDS) {
            Some(Kind::Dirichlet)
        } else if has(&BETA_FIELDS) {
            Some(Kind::Beta)
        } else if has(&GAMMA_FIELDS) {
            Some(Kind::Gamma)
        } else {
            None
        }
    }

    /// Like [`Kind::detect`], with a plan-time error naming the function and argument.
    pub fn expect(function: &str, argument: &str, data_type: &DataType) -> Result<Kind> {
        match Kind::detect(data_type) {
            Some(kind) => Ok(kind),
            None => plan_err!(
                "{function}: argument {argument} is {}; expected {ACCEPTED_SHAPES}",
                describe_type(data_type)
            ),
        }
    }
}

/// An argument's type in the user's words for an error message: "a Beta posterior"
/// for a posterior struct (not its Arrow fields), "a NULL without a type", "a struct
/// with fields {x, y}", or "of type Utf8".
pub fn describe_type(data_type: &DataType) -> String {
    match (Kind::detect(data_type), data_type) {
        (Some(kind), _) => format!("a {} posterior", kind.name()),
        (None, DataType::Null) => "a NULL without a type".to_string(),
        (None, DataType::Map(..)) => "a map".to_string(),
        (None, DataType::Struct(fields)) => format!(
            "a struct with fields {{{}}}",
            fields
                .iter()
                .map(|f| f.name().as_str())
                .collect::<Vec<_>>()
                .join(", ")
        ),
        (None, other) => format!("of type {other}"),
    }
}

fn list_of(item: DataType) -> DataType {
    DataType::List(Arc::new(Field::new_list_field(item, true)))
}

/// A posterior of any family.
#[derive(Debug, Clone, PartialEq)]
pub enum AnyPosterior {
    Beta(BetaPosterior),
    Gamma(GammaPosterior),
    Nig(NigPosterior),
    Dirichlet(DirichletPosterior),
}

impl AnyPosterior {
    /// The constant SQL of this posterior's prior, with every parameter written so
    /// that it reads back as the same f64 (Rust prints the shortest text that
    /// round-trips).
    pub fn prior_sql(&self) -> String {
        match self {
            AnyPosterior::Beta(b) => format!("beta_prior({}, {})", b.prior.a0, b.prior.b0),
            AnyPosterior::Gamma(g) => {
                format!("gamma_prior({}, {})", g.prior.shape0, g.prior.rate0)
            }
            AnyPosterior::Nig(n) => format!(
                "nig_prior({}, {}, {}, {})",
                n.prior.mu0, n.prior.kappa0, n.prior.alpha0, n.prior.beta0
            ),
            AnyPosterior::Dirichlet(d) => format!(
                "dirichlet_prior([{}], [{}])",
                d.prior
                    .classes
                    .iter()
                    .map(|c| crate::encode::text(c))
                    .collect::<Vec<_>>()
                    .join(", "),
                d.prior
                    .alpha0
                    .iter()
                    .map(|a| format!("{a}"))
                    .collect::<Vec<_>>()
                    .join(", ")
            ),
        }
    }

    pub fn kind(&self) -> Kind {
        match self {
            AnyPosterior::Beta(_) => Kind::Beta,
            AnyPosterior::Gamma(_) => Kind::Gamma,
            AnyPosterior::Nig(_) => Kind::Nig,
            AnyPosterior::Dirichlet(_) => Kind::Dirichlet,
        }
    }

    /// The marginal a reader looks at; Dirichlet posteriors need a class.
    pub fn marginal(&self, class: Option<&str>) -> Result<Marginal, FamilyError> {
        let m = match self {
            AnyPosterior::Beta(p) => p.marginal(),
            AnyPosterior::Gamma(p) => p.marginal(),
            AnyPosterior::Nig(p) => p.marginal(),
            AnyPosterior::Dirichlet(p) => {
                let class = class.ok_or_else(|| {
                    FamilyError::InvalidClasses(
                        "a Dirichlet posterior needs a class argument".into(),
                    )
                })?;
                p.marginal(p.prior.index_of(class)?)
            }
        };
        m.check()
    }

    pub fn evidence(&self) -> f64 {
        match self {
            AnyPosterior::Beta(p) => p.evidence(),
            AnyPosterior::Gamma(p) => p.evidence(),
            AnyPosterior::Nig(p) => p.evidence(),
            AnyPosterior::Dirichlet(p) => p.evidence(),
        }
    }

    /// The evidence as additive sums (see `Conjugate::evidence_sums`).
    pub fn evidence_sums(&self) -> Vec<Dd> {
        match self {
            AnyPosterior::Beta(p) => p.evidence_sums(),
            AnyPosterior::Gamma(p) => p.evidence_sums(),
            AnyPosterior::Nig(p) => p.evidence_sums(),
            AnyPosterior::Dirichlet(p) => p.evidence_sums(),
        }
    }

    /// This posterior's prior with the evidence of `sums` (see
    /// `Conjugate::with_evidence_sums`).
    pub fn with_evidence_sums(&self, sums: &[Dd]) -> AnyPosterior {
        match self {
            AnyPosterior::Beta(p) => AnyPosterior::Beta(p.with_evidence_sums(sums)),
            AnyPosterior::Gamma(p) => AnyPosterior::Gamma(p.with_evidence_sums(sums)),
            AnyPosterior::Nig(p) => AnyPosterior::Nig(p.with_evidence_sums(sums)),
            AnyPosterior::Dirichlet(p) => AnyPosterior::Dirichlet(p.with_evidence_sums(sums)),
        }
    }

    /// An error naming both priors unless `other` has this posterior's prior.
    pub fn same_prior(&self, other: &AnyPosterior) -> Result<(), FamilyError> {
        match (self, other) {
            (AnyPosterior::Beta(a), AnyPosterior::Beta(b)) => a.same_prior(b),
            (AnyPosterior::Gamma(a), AnyPosterior::Gamma(b)) => a.same_prior(b),
            (AnyPosterior::Nig(a), AnyPosterior::Nig(b)) => a.same_prior(b),
            (AnyPosterior::Dirichlet(a), AnyPosterior::Dirichlet(b)) => a.same_prior(b),
            (a, b) => Err(FamilyError::PriorMismatch {
                left: a.kind().name().into(),
                right: b.kind().name().into(),
            }),
        }
    }

    /// Apply a binary family operation to two posteriors of the same family.
    pub fn combine(&self, other: &AnyPosterior, op: Combine) -> Result<AnyPosterior, FamilyError> {
        fn run<P: Conjugate>(a: &P, b: &P, op: Combine) -> Result<P, FamilyError> {
            match op {
                Combine::Merge => a.merge(b),
                Combine::Subtract => a.subtract(b),
            }
        }
        Ok(match (self, other) {
            (AnyPosterior::Beta(a), AnyPosterior::Beta(b)) => AnyPosterior::Beta(run(a, b, op)?),
            (AnyPosterior::Gamma(a), AnyPosterior::Gamma(b)) => AnyPosterior::Gamma(run(a, b, op)?),
            (AnyPosterior::Nig(a), AnyPosterior::Nig(b)) => AnyPosterior::Nig(run(a, b, op)?),
            (AnyPosterior::Dirichlet(a), AnyPosterior::Dirichlet(b)) => {
                AnyPosterior::Dirichlet(run(a, b, op)?)
            }
            (a, b) => return Err(mismatch(a, b)),
        })
    }

    pub fn scale(&self, factor: f64) -> Result<AnyPosterior, FamilyError> {
        Ok(match self {
            AnyPosterior::Beta(p) => AnyPosterior::Beta(p.scale(factor)?),
            AnyPosterior::Gamma(p) => AnyPosterior::Gamma(p.scale(factor)?),
            AnyPosterior::Nig(p) => AnyPosterior::Nig(p.scale(factor)?),
            AnyPosterior::Dirichlet(p) => AnyPosterior::Dirichlet(p.scale(factor)?),
        })
    }

    /// Replace the prior by `prior`'s full posterior (a posterior serves as a prior
    /// for new data), keeping this state's evidence.
    pub fn with_prior(&self, prior: &AnyPosterior) -> Result<AnyPosterior, FamilyError> {
        let prior = prior
            .as_prior()
            .map_err(|e| e.derived("the new prior (its evidence folded in)"))?;
        Ok(match (self, prior) {
            (AnyPosterior::Beta(p), AnyPosterior::Beta(q)) => {
                AnyPosterior::Beta(p.with_prior(q.prior))
            }
            (AnyPosterior::Gamma(p), AnyPosterior::Gamma(q)) => {
                AnyPosterior::Gamma(p.with_prior(q.prior))
            }
            (AnyPosterior::Nig(p), AnyPosterior::Nig(q)) => {
                AnyPosterior::Nig(p.with_prior(q.prior))
            }
            (AnyPosterior::Dirichlet(p), AnyPosterior::Dirichlet(q)) => {
                AnyPosterior::Dirichlet(p.with_prior(q.prior)?)
            }
            (a, b) => return Err(mismatch(a, &b)),
        })
    }

    /// This posterior's data under its parent level's: a prior with the mean of
    /// `parent` less the data of `own` (this level's rows inside the parent, so no row
    /// counts twice) and `strength` pseudo-observations (for the Normal-Inverse-Gamma,
    /// `kappa0`; the variance belief stays this posterior's prior's).
    pub fn under(
        &self,
        parent: &AnyPosterior,
        own: Option<&AnyPosterior>,
        strength: f64,
    ) -> Result<AnyPosterior, FamilyError> {
        let strength = crate::family::positive("strength", strength)?;
        let kind = self.kind();
        if parent.kind() != kind {
            return Err(mismatch(self, parent));
        }
        if let Some(o) = own.filter(|o| o.kind() != kind) {
            return Err(mismatch(self, o));
        }
        self.under_checked(parent, own, strength)
            .map_err(|e| e.derived("the prior built from the parent's mean and the strength"))
    }

    /// [`AnyPosterior::under`] once the strength and the families are checked.
    fn under_checked(
        &self,
        parent: &AnyPosterior,
        own: Option<&AnyPosterior>,
        strength: f64,
    ) -> Result<AnyPosterior, FamilyError> {
        Ok(match (self, parent, own) {
            (AnyPosterior::Beta(p), AnyPosterior::Beta(q), own) => {
                let center = match own {
                    Some(AnyPosterior::Beta(o)) => q.subtract(&o.with_prior(q.prior))?,
                    _ => *q,
                };
                let (a, b) = center.params();
                let m = a / (a + b);
                AnyPosterior::Beta(
                    p.with_prior(BetaPrior::new(strength * m, strength * (1.0 - m))?),
                )
            }
            (AnyPosterior::Gamma(p), AnyPosterior::Gamma(q), own) => {
                let center = match own {
                    Some(AnyPosterior::Gamma(o)) => q.subtract(&o.with_prior(q.prior))?,
                    _ => *q,
                };
                let (shape, rate) = center.params();
                AnyPosterior::Gamma(
                    p.with_prior(GammaPrior::new(strength * shape / rate, strength)?),
                )
            }
            (AnyPosterior::Nig(p), AnyPosterior::Nig(q), own) => {
                let center = match own {
                    Some(AnyPosterior::Nig(o)) => q.subtract(&o.with_prior(q.prior))?,
                    _ => *q,
                };
                let mu = center.params().mu;
                let NigPrior { alpha0, beta0, .. } = p.prior;
                AnyPosterior::Nig(p.with_prior(NigPrior::new(mu, strength, alpha0, beta0)?))
            }
            (AnyPosterior::Dirichlet(p), AnyPosterior::Dirichlet(q), own) => {
                let center = match own {
                    Some(AnyPosterior::Dirichlet(o)) => {
                        q.subtract(&o.with_prior(q.prior.clone())?)?
                    }
                    _ => q.clone(),
                };
                let alpha = center.params();
                let total: f64 = alpha.iter().sum();
                let prior = DirichletPrior::new(
                    center.prior.classes.clone(),
                    alpha.iter().map(|a| strength * a / total).collect(),
                )?;
                AnyPosterior::Dirichlet(p.with_prior(prior)?)
            }
            (a, b, _) => return Err(mismatch(a, b)),
        })
    }

    /// Fold the evidence into the prior: the posterior as a prior with zero evidence.
    pub fn as_prior(&self) -> Result<AnyPosterior, FamilyError> {
        Ok(match self {
            AnyPosterior::Beta(p) => {
                let (a, b) = p.params();
                AnyPosterior::Beta(BetaPosterior::new(BetaPrior::new(a, b)?))
            }
            AnyPosterior::Gamma(p) => {
                let (shape, rate) = p.params();
                AnyPosterior::Gamma(GammaPosterior::new(GammaPrior::new(shape, rate)?))
            }
            AnyPosterior::Nig(p) => {
                let q = p.params();
                AnyPosterior::Nig(NigPosterior::new(NigPrior::new(
                    q.mu, q.kappa, q.alpha, q.beta,
                )?))
            }
            AnyPosterior::Dirichlet(p) => AnyPosterior::Dirichlet(DirichletPosterior::new(
                DirichletPrior::new(p.prior.classes.clone(), p.params())?,
            )),
        })
    }
}

/// Two posteriors of different families where one family is needed.
fn mismatch(a: &AnyPosterior, b: &AnyPosterior) -> FamilyError {
    FamilyError::PriorMismatch {
        left: a.kind().name().into(),
        right: b.kind().name().into(),
    }
}

/// The binary operations of [`AnyPosterior::combine`].
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Combine {
    Merge,
    Subtract,
}

/// A column of posteriors, decoded lazily row by row.
pub struct PosteriorColumn {
    kind: Kind,
    len: usize,
    nulls: Option<NullBuffer>,
    floats: Vec<Float64Array>,
    lists: Option<(ListArray, ListArray, ListArray)>,
}

impl PosteriorColumn {
    /// Decode a struct column; `function` names the caller in errors.
    pub fn new(function: &str, array: &ArrayRef) -> Result<Self> {
        let kind = Kind::detect(array.data_type()).ok_or_else(|| {
            exec_datafusion_err!(
                "{function}: got {}; expected {ACCEPTED_SHAPES}",
                array.data_type()
            )
        })?;
        let st = array.as_struct();
        let column = |name: &str| -> Result<ArrayRef> {
            st.column_by_name(name)
                .cloned()
                .ok_or_else(|| exec_datafusion_err!("{function}: field {name} missing"))
        };
        // Cast only what is not already in the canonical layout: a window frame
        // decodes a column of one row per row it evaluates.
        let as_type = |name: &str, to: &DataType| -> Result<ArrayRef> {
            let c = column(name)?;
            Ok(if c.data_type() == to {
                c
            } else {
                cast(&c, to)?
            })
        };
        let as_f64 = |name: &str| -> Result<Float64Array> {
            Ok(as_type(name, &DataType::Float64)?.as_primitive().clone())
        };
        let names: &[&str] = match kind {
            Kind::Beta => &BETA_FIELDS,
            Kind::Gamma => &GAMMA_FIELDS,
            Kind::Nig => &NIG_FIELDS,
            Kind::Dirichlet => &[],
        };
        let floats = names
            .iter()
            .map(|n| as_f64(n))
            .collect::<Result<Vec<_>>>()?;
        let lists = if kind == Kind::Dirichlet {
            let list = |name: &str, item: DataType| -> Result<ListArray> {
                Ok(as_type(name, &list_of(item))?.as_list::<i32>().clone())
            };
            Some((
                list("classes", DataType::Utf8)?,
                list("a0", DataType::Float64)?,
                list("counts", DataType::Float64)?,
            ))
        } else {
            None
        };
        Ok(PosteriorColumn {
            kind,
            len: array.len(),
            nulls: st.nulls().cloned(),
            floats,
            lists,
        })
    }

    pub fn kind(&self) -> Kind {
        self.kind
    }

    pub fn len(&self) -> usize {
        self.len
    }

    /// The Float64 fields of a Beta, Gamma or NIG column, in format order, with the
    /// struct's own null mask: the vectorised readers' fast path.
    pub fn float_fields(&self) -> Option<(&[Float64Array], Option<&NullBuffer>)> {
        (self.kind != Kind::Dirichlet).then_some((self.floats.as_slice(), self.nulls.as_ref()))
    }

    pub fn is_empty(&self) -> bool {
        self.len == 0
    }

    /// Row `i`: `Ok(None)` for a NULL posterior (or a NULL field), an error for
    /// stored values that are not a valid posterior.
    pub fn get(&self, i: usize) -> Result<Option<AnyPosterior>, FamilyError> {
        if self.nulls.as_ref().is_some_and(|n| n.is_null(i)) {
            return Ok(None);
        }
        if self.floats.iter().any(|f| f.is_null(i)) {
            return Ok(None);
        }
        let v = |k: usize| self.floats[k].value(i);
        Ok(Some(match self.kind {
            Kind::Beta => AnyPosterior::Beta(BetaPosterior::from_parts(v(0), v(1), v(2), v(3))?),
            Kind::Gamma => AnyPosterior::Gamma(GammaPosterior::from_parts(v(0), v(1), v(2), v(3))?),
            Kind::Nig => AnyPosterior::Nig(NigPosterior::from_parts(
                NigPrior::new(v(0), v(1), v(2), v(3))?,
                v(4),
                v(5),
                v(6),
            )?),
            Kind::Dirichlet => {
                let (classes, a0, counts) = self.lists.as_ref().expect("dirichlet lists");
                if classes.is_null(i) || a0.is_null(i) || counts.is_null(i) {
                    return Ok(None);
                }
                let names = classes.value(i);
                let names = names.as_string::<i32>();
                let names: Vec<String> = (0..names.len())
                    .map(|k| names.value(k).to_string())
                    .collect();
                let floats = |l: &ListArray| -> Vec<f64> {
                    let v = l.value(i);
                    v.as_primitive::<datafusion::arrow::datatypes::Float64Type>()
                        .iter()
                        .map(|x| x.unwrap_or(f64::NAN))
                        .collect()
                };
                let prior = DirichletPrior::new(names, floats(a0))?;
                AnyPosterior::Dirichlet(DirichletPosterior::from_parts(prior, floats(counts))?)
            }
        }))
    }
}

/// Build a column of `kind` from optional posteriors (None becomes NULL). A
/// posterior whose evidence overflowed is an error naming `function`, never a
/// stored `inf` or `NaN`.
pub fn build(function: &str, kind: Kind, rows: &[Option<AnyPosterior>]) -> Result<ArrayRef> {
    let DataType::Struct(fields) = kind.data_type() else {
        unreachable!("posterior types are structs")
    };
    // A posterior of another family has no place in this column: an error, never
    // a row of zeros.
    if let Some(other) = rows.iter().flatten().find(|p| p.kind() != kind) {
        return datafusion::common::exec_err!(
            "a {} posterior cannot be stored in a column of {} posteriors",
            other.kind().name(),
            kind.name()
        );
    }
    let nulls = NullBuffer::from(rows.iter().map(Option::is_some).collect::<Vec<bool>>());
    let columns: Vec<ArrayRef> = if kind == Kind::Dirichlet {
        let mut classes = ListBuilder::new(StringBuilder::new());
        let mut a0 = ListBuilder::new(Float64Builder::new());
        let mut counts = ListBuilder::new(Float64Builder::new());
        for row in rows {
            if let Some(AnyPosterior::Dirichlet(p)) = row {
                for c in &p.prior.classes {
                    classes.values().append_value(c);
                }
                a0.values().append_slice(&p.prior.alpha0);
                finite_evidence(function, &p.counts)?;
                counts.values().append_slice(&p.counts);
            }
            classes.append(true);
            a0.append(true);
            counts.append(true);
        }
        vec![
            Arc::new(classes.finish()),
            Arc::new(a0.finish()),
            Arc::new(counts.finish()),
        ]
    } else {
        let width = fields.len();
        let mut cols: Vec<Vec<f64>> = vec![Vec::with_capacity(rows.len()); width];
        for row in rows {
            let values: Vec<f64> = match row {
                Some(AnyPosterior::Beta(p)) => {
                    vec![p.prior.a0, p.prior.b0, p.successes, p.trials]
                }
                Some(AnyPosterior::Gamma(p)) => {
                    vec![p.prior.shape0, p.prior.rate0, p.events, p.exposure]
                }
                Some(AnyPosterior::Nig(p)) => vec![
                    p.prior.mu0,
                    p.prior.kappa0,
                    p.prior.alpha0,
                    p.prior.beta0,
                    p.stats.n,
                    p.stats.mean,
                    p.stats.m2,
                ],
                // NULL rows: masked by the null buffer.
                _ => vec![0.0; width],
            };
            finite_evidence(function, &values)?;
            for (col, v) in cols.iter_mut().zip(values) {
                col.push(v);
            }
        }
        cols.into_iter()
            .map(|c| Arc::new(Float64Array::from(c)) as ArrayRef)
            .collect()
    };
    Ok(Arc::new(StructArray::try_new(
        fields,
        columns,
        Some(nulls),
    )?))
}

/// A one-row posterior column as a scalar, wrapped as it is: a window evaluates its
/// aggregate once per row, and slicing a copy of each result was a sixth of its time.
pub fn one_row_scalar(column: &ArrayRef) -> datafusion::common::ScalarValue {
    datafusion::common::ScalarValue::Struct(Arc::new(column.as_struct().clone()))
}

/// Build a struct column of a float-field family directly from per-row field
/// values laid out field-major (`columns[field][row]`): the fast path of the fits.
pub fn build_floats(function: &str, kind: Kind, columns: Vec<Vec<f64>>) -> Result<ArrayRef> {
    let DataType::Struct(fields) = kind.data_type() else {
        unreachable!("posterior types are structs")
    };
    for column in &columns {
        finite_evidence(function, column)?;
    }
    let arrays = columns
        .into_iter()
        .map(|c| Arc::new(Float64Array::from(c)) as ArrayRef)
        .collect();
    Ok(Arc::new(StructArray::try_new(fields, arrays, None)?))
}

/// Sums of weights, values or exposures beyond the largest float (about 1.8e308)
/// become `inf` or `NaN`; refuse them where a posterior is stored, the one place
/// every fit, pool and transform passes through.
fn finite_evidence(function: &str, values: &[f64]) -> Result<()> {
    if values.iter().all(|v| v.is_finite()) {
        return Ok(());
    }
    datafusion::common::exec_err!(
        "{function}: a posterior's evidence is not a finite number (its sums exceed about \
         1.8e308); allowed: weights, values, events and exposures whose sums per level are \
         finite"
    )
}
