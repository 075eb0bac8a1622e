//! Documentation of every SQL function, in one table. It feeds DataFusion's
//! `Documentation` (shown by `SHOW FUNCTIONS` / information_schema), the shell's
//! `posterity functions`, and the README's function reference (a test keeps the
//! README in step with this table).

use std::collections::HashMap;
use std::sync::OnceLock;

use datafusion::common::{DataFusionError, Result};
use datafusion::logical_expr::{DocSection, Documentation};

/// One function's documentation.
pub struct FunctionDoc {
    pub name: &'static str,
    pub section: &'static str,
    pub description: &'static str,
    pub syntax: &'static str,
    pub arguments: &'static [(&'static str, &'static str)],
    pub example: &'static str,
}

const PRIORS: &str = "Priors";
const FIT: &str = "Fitting posteriors (aggregate and window functions)";
const COMBINE: &str = "Combining posteriors (aggregate and window functions)";
const READ: &str = "Reading posteriors";
const TRANSFORM: &str = "Transforming posteriors";
const HELPERS: &str = "Helpers";

const P: (&str, &str) = ("p", "A posterior (or prior) of any family.");
const CLASS: (&str, &str) = (
    "class",
    "Dirichlet posteriors only: the class to read, given right after p.",
);

/// Every function, in reference order.
pub const FUNCTIONS: &[FunctionDoc] = &[
    FunctionDoc {
        name: "beta_prior",
        section: PRIORS,
        description: "A Beta(a, b) prior for 0/1 outcomes: a posterior with zero evidence. \
            Beta(0.5, 0.5) is Jeffreys' prior (the default of beta_posterior); Beta(1, 1) is uniform.",
        syntax: "beta_prior(a, b)",
        arguments: &[("a", "Prior successes, finite and > 0."), ("b", "Prior failures, finite and > 0.")],
        example: "SELECT posterior_mean(beta_prior(2, 38));  -- 0.05",
    },
    FunctionDoc {
        name: "gamma_prior",
        section: PRIORS,
        description: "A Gamma(shape, rate) prior for a Poisson rate per unit of exposure: shape \
            prior events seen in rate units of exposure. Default of gamma_posterior: Gamma(0.5, 1).",
        syntax: "gamma_prior(shape, rate)",
        arguments: &[("shape", "Prior events, finite and > 0."), ("rate", "Prior exposure, finite and > 0.")],
        example: "SELECT posterior_mean(gamma_prior(3, 2));  -- 1.5 visits per year",
    },
    FunctionDoc {
        name: "nig_prior",
        section: PRIORS,
        description: "A Normal-Inverse-Gamma prior for continuous outcomes: the level mean is \
            centred on mu0 with the weight of kappa0 observations; the variance has an \
            inverse-gamma(alpha0, beta0) prior. Default of nig_posterior: nig_prior(0, 0.0001, 1.5, 1), \
            which assumes outcomes of order one: pass a prior on your data's scale or fit one with fit_prior.",
        syntax: "nig_prior(mu0, kappa0, alpha0, beta0)",
        arguments: &[
            ("mu0", "Prior mean, finite."),
            ("kappa0", "Prior observations behind mu0, finite and > 0."),
            ("alpha0", "Variance prior shape, finite and > 0."),
            ("beta0", "Variance prior scale, finite and > 0."),
        ],
        example: "SELECT posterior_mean(nig_prior(120, 1, 2, 800));  -- 120",
    },
    FunctionDoc {
        name: "dirichlet_prior",
        section: PRIORS,
        description: "A Dirichlet prior over named classes for multi-class outcomes.",
        syntax: "dirichlet_prior(classes, concentration)",
        arguments: &[
            ("classes", "A list of distinct class names, e.g. ['attended', 'no_show']."),
            ("concentration", "One number for every class, or a list with one number per class; each finite and > 0."),
        ],
        example: "SELECT posterior_mean(dirichlet_prior(['attended', 'no_show'], [3, 1]), 'no_show');  -- 0.25",
    },
    FunctionDoc {
        name: "beta_posterior",
        section: FIT,
        description: "Fits a Beta posterior from 0/1 outcomes (BOOLEAN, integer or float; anything \
            but 0/1 is an error). Rows whose outcome or weight is NULL are ignored; an empty group or \
            window frame yields the prior. Works as a window function, e.g. OVER (PARTITION BY key \
            ORDER BY day RANGE BETWEEN UNBOUNDED PRECEDING AND 1 PRECEDING) for as-of encodings \
            from strictly earlier days. The prior must be a constant.",
        syntax: "beta_posterior(outcome [, prior [, weight]])",
        arguments: &[
            ("outcome", "0/1, false/true."),
            ("prior", "A constant Beta prior; default beta_prior(0.5, 0.5)."),
            ("weight", "Row weight, finite and >= 0 (decay weights, pre-aggregated counts); default 1."),
        ],
        example: "SELECT breed, beta_posterior(no_show, beta_prior(1, 19)) AS p FROM appointments GROUP BY breed;",
    },
    FunctionDoc {
        name: "beta_posterior_counts",
        section: FIT,
        description: "Fits a Beta posterior from pre-aggregated success and trial counts \
            (0 <= successes <= trials). NULL rows are ignored.",
        syntax: "beta_posterior_counts(successes, trials [, prior])",
        arguments: &[
            ("successes", "Successes in the row, finite, >= 0 and <= trials."),
            ("trials", "Trials in the row, finite and >= 0."),
            ("prior", "A constant Beta prior; default beta_prior(0.5, 0.5)."),
        ],
        example: "SELECT clinic, beta_posterior_counts(no_shows, bookings) AS p FROM daily GROUP BY clinic;",
    },
    FunctionDoc {
        name: "gamma_posterior",
        section: FIT,
        description: "Fits a Gamma posterior for a Poisson rate from event counts and exposures \
            (events per unit of exposure). NULL rows are ignored.",
        syntax: "gamma_posterior(events [, exposure [, prior]])",
        arguments: &[
            ("events", "Events in the row, finite and >= 0."),
            ("exposure", "Exposure of the row (e.g. years enrolled), finite and >= 0; default 1."),
            ("prior", "A constant Gamma prior; default gamma_prior(0.5, 1)."),
        ],
        example: "SELECT breed, gamma_posterior(visits, years_enrolled) AS p FROM pets GROUP BY breed;",
    },
    FunctionDoc {
        name: "nig_posterior",
        section: FIT,
        description: "Fits a Normal-Inverse-Gamma posterior from continuous values; readers refer \
            to the level's mean (a Student-t marginal). Statistics are kept with weighted \
            Welford/Chan updates. NULL rows are ignored; NaN and infinite values are errors.",
        syntax: "nig_posterior(value [, prior [, weight]])",
        arguments: &[
            ("value", "The outcome, finite."),
            ("prior", "A constant NIG prior; default nig_prior(0, 0.0001, 1.5, 1)."),
            ("weight", "Row weight, finite and >= 0; default 1."),
        ],
        example: "SELECT vet, nig_posterior(amount, nig_prior(80, 1, 2, 2000)) AS p FROM invoices GROUP BY vet;",
    },
    FunctionDoc {
        name: "dirichlet_posterior",
        section: FIT,
        description: "Fits a Dirichlet posterior from class labels; a class not in the prior is \
            an error. NULL rows are ignored.",
        syntax: "dirichlet_posterior(class, prior [, weight])",
        arguments: &[
            ("class", "The observed class (text)."),
            ("prior", "A constant Dirichlet prior naming the classes."),
            ("weight", "Row weight, finite and >= 0; default 1."),
        ],
        example: "SELECT clinic, dirichlet_posterior(outcome, dirichlet_prior(['attended', 'no_show', 'late_cancel', 'rescheduled'], 1)) AS p FROM appointments GROUP BY clinic;",
    },
    FunctionDoc {
        name: "posterior_pool",
        section: COMBINE,
        description: "Sums the evidence of posteriors that share a prior (per-day or per-partition \
            encodings into one). NULL inputs are skipped; different priors are an error naming both. \
            The evidence is summed in compensated arithmetic, so the result does not depend on \
            the order rows arrive in; sliding window frames remove what leaves them. A group or window frame with no non-NULL input yields NULL (there is no prior to give).",
        syntax: "posterior_pool(p)",
        arguments: &[P],
        example: "SELECT breed, posterior_pool(p) AS p FROM daily_encodings GROUP BY breed;",
    },
    FunctionDoc {
        name: "posterior_pool_before",
        section: COMBINE,
        description: "Window function: each row's pool of the posteriors of its partition's rows at \
            strictly earlier times t (with a gap: at times up to t - gap), for as-of encodings. \
            The window must be ordered by t, ascending, with no frame clause (the rows each pool \
            reads follow from t and gap); rows at one time read the same pool, so they never \
            see each other. Gives the posteriors posterior_pool gives over the frame \
            ROWS (or, with a gap, RANGE) BETWEEN UNBOUNDED PRECEDING and the row's earlier times, \
            to the bit, in one pass over the partition. A row with no earlier non-NULL posterior \
            (its level's first time) or a NULL t yields NULL: COALESCE it with the prior.",
        syntax: "posterior_pool_before(p, t [, gap]) OVER (ORDER BY t)",
        arguments: &[
            ("p", "The posterior of each row (one per level and time, or per row); NULLs are skipped."),
            ("t", "The time the window is ordered by: any type without a gap; a number with one."),
            ("gap", "Optional: a row reads only times at least this much earlier (a constant > 0)."),
        ],
        example: "SELECT breed, day, COALESCE(posterior_pool_before(p, day) OVER (PARTITION BY breed ORDER BY day), beta_prior(2, 18)) AS as_of FROM (SELECT breed, day, beta_posterior(no_show, beta_prior(2, 18)) AS p FROM appointments GROUP BY breed, day);",
    },
    FunctionDoc {
        name: "fit_prior",
        section: COMBINE,
        description: "Fits an empirical-Bayes prior of the same family from one posterior per level \
            by maximising the marginal likelihood across levels (beta-binomial, Dirichlet-multinomial \
            by Minka's fixed point, negative binomial with exposures, normal hierarchy). The \
            strength is capped at 1e6 pseudo-observations when levels show no spread. When no \
            level has more than one row (binary, class or continuous outcomes) the strength is \
            not identified and is set to the cap, every level pooled to the overall rate; a Normal \
            prior's spread then comes from the values' total variance, never from a fixed unit.",
        syntax: "fit_prior(p)",
        arguments: &[P],
        example: "SELECT fit_prior(p) FROM (SELECT breed, beta_posterior(no_show) AS p FROM appointments GROUP BY breed);",
    },
    FunctionDoc {
        name: "fit_prior_report",
        section: COMBINE,
        description: "Like fit_prior, but returns a JSON text report: the fitted parameters, the log \
            marginal likelihood, iterations, whether it converged, the prior's strength in \
            pseudo-observations and the number of levels.",
        syntax: "fit_prior_report(p)",
        arguments: &[P],
        example: "SELECT fit_prior_report(p) FROM breed_encodings;",
    },
    FunctionDoc {
        name: "fit_strength",
        section: COMBINE,
        description: "Aggregate: the strength (pseudo-observations) of child levels' priors \
            centred on their parents, fitted by maximum marginal likelihood: the s that makes \
            the sum over rows of the log marginal likelihood of posterior_under(p, parent, own, s) \
            largest, searched from 0.001 to 1e6 (a result at 1e6: the children show no spread \
            around their parents). Rows with a NULL p or parent are skipped; no such row gives \
            NULL. The result does not depend on row order or partitioning.",
        syntax: "fit_strength(p, parent, own)",
        arguments: &[
            P,
            ("parent", "The parent level's posterior, same family."),
            ("own", "p's level's evidence inside the parent (NULL: none)."),
        ],
        example: "SELECT fit_strength(c.p, d.p, c.p) AS strength FROM postcodes c JOIN districts d \
            USING (district);",
    },
    FunctionDoc {
        name: "posterior_mean",
        section: READ,
        description: "Posterior mean of the success probability (Beta), rate (Gamma), level mean \
            (NIG; the Student-t centre) or class probability (Dirichlet). NULL posterior gives NULL.",
        syntax: "posterior_mean(p [, class])",
        arguments: &[P, CLASS],
        example: "SELECT posterior_mean(beta_prior(2.5, 1.5));  -- 0.625",
    },
    FunctionDoc {
        name: "posterior_var",
        section: READ,
        description: "Posterior variance. For NIG it is the variance of the level mean, a \
            Student-t with 2 * alpha_n degrees of freedom: NULL (never inf) when alpha_n <= 1, \
            where that variance is infinite.",
        syntax: "posterior_var(p [, class])",
        arguments: &[P, CLASS],
        example: "SELECT posterior_var(beta_prior(2.5, 1.5));  -- 0.046875",
    },
    FunctionDoc {
        name: "posterior_sd",
        section: READ,
        description: "Posterior standard deviation (square root of posterior_var); NULL where \
            posterior_var is NULL (a NIG posterior with alpha_n <= 1).",
        syntax: "posterior_sd(p [, class])",
        arguments: &[P, CLASS],
        example: "SELECT posterior_sd(p) FROM breed_encodings;",
    },
    FunctionDoc {
        name: "posterior_quantile",
        section: READ,
        description: "Inverse CDF of the posterior at probability q (accurate in both tails).",
        syntax: "posterior_quantile(p [, class], q)",
        arguments: &[P, CLASS, ("q", "Probability strictly between 0 and 1.")],
        example: "SELECT posterior_quantile(p, 0.05) AS pessimistic FROM breed_encodings;",
    },
    FunctionDoc {
        name: "posterior_interval",
        section: READ,
        description: "Equal-tailed credible interval with the given probability content, as a \
            struct {lower, upper}. It describes sampling uncertainty under the model, not data \
            quality or drift.",
        syntax: "posterior_interval(p [, class], level)",
        arguments: &[P, CLASS, ("level", "Probability content strictly between 0 and 1, e.g. 0.9.")],
        example: "SELECT posterior_interval(p, 0.9)['lower'] FROM breed_encodings;",
    },
    FunctionDoc {
        name: "posterior_prob_above",
        section: READ,
        description: "Posterior probability that the parameter exceeds t, computed directly from \
            the upper tail.",
        syntax: "posterior_prob_above(p [, class], t)",
        arguments: &[P, CLASS, ("t", "Threshold, finite.")],
        example: "SELECT breed FROM breed_encodings WHERE posterior_prob_above(p, 0.10) > 0.95;",
    },
    FunctionDoc {
        name: "posterior_data_weight",
        section: READ,
        description: "The amount of data behind the posterior, in the weight of its rows: \
            weighted trials (Beta), exposure (Gamma), weighted count (NIG) or total weighted \
            count (Dirichlet); 0 for a prior. Also callable as posterior_evidence, its name \
            before this version, kept as an alias for now (in Bayesian usage \"evidence\" \
            means the marginal likelihood, which this is not).",
        syntax: "posterior_data_weight(p)",
        arguments: &[P],
        example: "SELECT posterior_data_weight(p) FROM breed_encodings;",
    },
    FunctionDoc {
        name: "posterior_draw",
        section: READ,
        description: "A deterministic draw from the posterior: the quantile at a uniform number \
            hashed from the seed and the posterior's parameters. Same inputs, same draw.",
        syntax: "posterior_draw(p [, class], seed)",
        arguments: &[P, CLASS, ("seed", "Integer seed; vary it per row for independent draws.")],
        example: "SELECT posterior_draw(p, row_id) FROM training;",
    },
    FunctionDoc {
        name: "posterior_merge",
        section: TRANSFORM,
        description: "Adds the evidence of two posteriors with the same prior. A NULL argument \
            counts as no evidence (the other is returned).",
        syntax: "posterior_merge(a, b)",
        arguments: &[("a", "A posterior."), ("b", "A posterior of the same family and prior.")],
        example: "SELECT posterior_merge(old.p, new.p) FROM old FULL JOIN new USING (breed);",
    },
    FunctionDoc {
        name: "posterior_subtract",
        section: TRANSFORM,
        description: "Removes b's evidence from a (b must be part of a's data): the out-of-fold \
            posterior is total minus the fold's. Removing more than a holds is an error; a NULL b \
            removes nothing.",
        syntax: "posterior_subtract(a, b)",
        arguments: &[("a", "A posterior."), ("b", "A posterior of the same prior, part of a.")],
        example: "SELECT posterior_subtract(total.p, fold.p) FROM total JOIN fold USING (breed);",
    },
    FunctionDoc {
        name: "posterior_without",
        section: TRANSFORM,
        description: "Removes one observation (leave-one-out): an outcome (Beta), events and \
            exposure (Gamma), a value (NIG) or a class (Dirichlet).",
        syntax: "posterior_without(p, observation [, weight])",
        arguments: &[
            P,
            ("observation", "The observation to remove."),
            ("weight", "Its weight (its exposure for Gamma); default 1."),
        ],
        example: "SELECT posterior_mean(posterior_without(e.p, a.no_show)) FROM appointments a JOIN enc e USING (breed);",
    },
    FunctionDoc {
        name: "posterior_scale",
        section: TRANSFORM,
        description: "Multiplies the evidence by a factor in [0, 1] (discounting; capping a parent \
            posterior to a few pseudo-observations before using it as a prior).",
        syntax: "posterior_scale(p, factor)",
        arguments: &[P, ("factor", "A number in [0, 1].")],
        example: "SELECT posterior_scale(p, least(1.0, 20 / posterior_data_weight(p))) FROM region_enc;",
    },
    FunctionDoc {
        name: "posterior_with_prior",
        section: TRANSFORM,
        description: "Keeps p's evidence under a new prior. A prior argument that carries evidence \
            is used with its evidence folded in (a parent's posterior becomes the child's prior).",
        syntax: "posterior_with_prior(p, prior)",
        arguments: &[P, ("prior", "A prior or posterior of the same family.")],
        example: "SELECT posterior_with_prior(p, (SELECT fit_prior(p) FROM enc)) FROM enc;",
    },
    FunctionDoc {
        name: "posterior_under",
        section: TRANSFORM,
        description: "A child level's posterior under its parent level's (postcode under \
            district): p's evidence under a prior with the mean of parent less the evidence of \
            own (the child's rows inside the parent, so no row counts twice) and strength \
            pseudo-observations (kappa0 for Normal-Inverse-Gamma, whose variance belief stays \
            p's prior's). A NULL parent leaves p unchanged; a NULL own removes nothing; own \
            holding more evidence than parent is an error.",
        syntax: "posterior_under(p, parent, own, strength)",
        arguments: &[
            P,
            ("parent", "The parent level's posterior, same family (NULL: p as it is)."),
            ("own", "p's level's evidence inside the parent, any prior (NULL: none)."),
            ("strength", "Pseudo-observations of the child's prior, a finite number > 0 \
                (fitted by fit_strength)."),
        ],
        example: "SELECT c.postcode, posterior_under(c.p, d.p, c.p, s.strength) FROM postcodes c \
            JOIN districts d USING (district) CROSS JOIN fitted s;",
    },
    FunctionDoc {
        name: "fold_of",
        section: HELPERS,
        description: "Fold number in 0..k-1 for a key, from a fixed 64-bit hash of its key_text: stable \
            across runs, platforms, partitionings and key types (123, 123.0 and '123' share a fold).",
        syntax: "fold_of(key [, k [, seed]])",
        arguments: &[
            ("key", "Any value; NULL keys give NULL."),
            ("k", "Number of folds, an integer >= 2; default 5."),
            ("seed", "Integer seed for a different assignment; default 0."),
        ],
        example: "SELECT fold_of(appointment_id, 5) AS fold FROM appointments;",
    },
    FunctionDoc {
        name: "normalize_key",
        section: HELPERS,
        description: "Messy key text made comparable: Unicode compatibility form (NFKC), lower \
            case, surrounding white space removed and inner runs of white space as one space. \
            NULL stays NULL; other types are normalised through their text form.",
        syntax: "normalize_key(text)",
        arguments: &[("text", "The key as text.")],
        example: "SELECT normalize_key('  Golden\u{00a0}RETRIEVER ');  -- 'golden retriever'",
    },
    FunctionDoc {
        name: "key_text",
        section: HELPERS,
        description: "A key value's text as encode, fold_of and the serving bundle read it: text as \
            it is; a floating-point number with a whole value as the integer it is ('106', as an \
            integer column gives, not '106.0'); NaN as NULL; anything else its text form. So an \
            integer key column that became floats to hold a missing value still meets its \
            levels. NULL stays NULL.",
        syntax: "key_text(value)",
        arguments: &[("value", "A key value of any type with a text form.")],
        example: "SELECT key_text(106.0), key_text(106), key_text(0.5);  -- '106', '106', '0.5'",
    },
    FunctionDoc {
        name: "decay_weight",
        section: HELPERS,
        description: "Exponential decay weight 0.5^(age / half_life): a row one half-life old counts 0.5.",
        syntax: "decay_weight(age, half_life)",
        arguments: &[
            ("age", "Age of the row, finite and >= 0 (same unit as half_life)."),
            ("half_life", "Half-life, finite and > 0."),
        ],
        example: "SELECT beta_posterior(no_show, beta_prior(1, 19), decay_weight(days_old, 90)) FROM appointments;",
    },
];

/// Checks a call's number of arguments; the error says it in the user's words with
/// the function's syntax: "beta_prior: takes 2 arguments, got 1; usage: beta_prior(a, b)".
pub fn check_arity(function: &str, n: usize, min: usize, max: usize) -> Result<()> {
    match (min..=max).contains(&n) {
        true => Ok(()),
        false => Err(arity_error(function, n, min, max, None)),
    }
}

/// The error of a call with `n` arguments where `min..=max` are allowed; `why`
/// (when the count depends on another argument) is said after it.
pub fn arity_error(
    function: &str,
    n: usize,
    min: usize,
    max: usize,
    why: Option<&str>,
) -> DataFusionError {
    let takes = match (min, max) {
        (1, 1) => "1 argument".to_string(),
        (a, b) if a == b => format!("{a} arguments"),
        (a, b) => format!("{a} to {b} arguments"),
    };
    let (here, why) = match why {
        Some(why) => (" here", format!(" ({why})")),
        None => ("", String::new()),
    };
    DataFusionError::Plan(format!(
        "{function}: takes {takes}{here}, got {n}{why}; usage: {}",
        syntax(function)
    ))
}

/// The function's syntax as the reference gives it ("" for an unknown name).
pub fn syntax(function: &str) -> &'static str {
    FUNCTIONS
        .iter()
        .find(|f| f.name == function)
        .map_or("", |f| f.syntax)
}

/// The DataFusion documentation of `name`.
pub fn get(name: &str) -> Option<&'static Documentation> {
    static DOCS: OnceLock<HashMap<&'static str, Documentation>> = OnceLock::new();
    DOCS.get_or_init(|| {
        FUNCTIONS
            .iter()
            .map(|f| (f.name, to_documentation(f)))
            .collect()
    })
    .get(name)
}

fn to_documentation(f: &FunctionDoc) -> Documentation {
    let section = DocSection {
        include: true,
        label: f.section,
        description: None,
    };
    let mut builder =
        Documentation::builder(section, f.description, f.syntax).with_sql_example(f.example);
    for (name, text) in f.arguments {
        builder = builder.with_argument(*name, *text);
    }
    builder.build()
}

/// Every function with the heading of its section when the section starts.
fn by_section() -> impl Iterator<Item = (Option<&'static str>, &'static FunctionDoc)> {
    FUNCTIONS.iter().enumerate().map(|(i, f)| {
        let starts = i == 0 || FUNCTIONS[i - 1].section != f.section;
        (starts.then_some(f.section), f)
    })
}

/// One line per function (syntax and first sentence), grouped by section, for the shell.
pub fn summary_text() -> String {
    let mut out = String::new();
    for (section, f) in by_section() {
        if let Some(section) = section {
            out.push_str(&format!("\n{section}\n"));
        }
        let first = f.description.split(". ").next().unwrap_or(f.description);
        out.push_str(&format!(
            "  {:<52} {}\n",
            f.syntax,
            first.trim_end_matches('.')
        ));
    }
    out
}

/// The function reference as Markdown, generated from [`FUNCTIONS`].
pub fn reference_markdown() -> String {
    let mut out = String::new();
    for (section, f) in by_section() {
        if let Some(section) = section {
            out.push_str(&format!("\n### {section}\n"));
        }
        out.push_str(&format!(
            "\n#### `{}`\n\n{}\n\n```sql\n{}\n```\n\n",
            f.name, f.description, f.syntax
        ));
        for (name, text) in f.arguments {
            out.push_str(&format!("- `{name}`: {text}\n"));
        }
        out.push_str(&format!("\nExample: `{}`\n", f.example));
    }
    out
}

/// Plain-text help for one function, for the shell.
pub fn help_text(f: &FunctionDoc) -> String {
    let mut out = format!("{}\n  {}\n\n  {}\n", f.syntax, f.section, f.description);
    for (name, text) in f.arguments {
        out.push_str(&format!("    {name:<14} {text}\n"));
    }
    out.push_str(&format!("  example: {}\n", f.example));
    out
}
