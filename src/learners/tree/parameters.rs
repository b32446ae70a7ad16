//! Tree parameters: the criterion, the split finder and [`TreeParams`], checked once
//! into a [`CheckedTreeParams`].

use crate::error::{Error, Result};
use crate::learners::Task;

/// At most this many histogram bins per feature.
pub const MAX_BINS: usize = 256;
/// [`Splitter::Auto`] uses histograms for nodes with more distinct in-bag rows than this.
pub const AUTO_HISTOGRAM_ABOVE: usize = 2048;
/// Added to the user's seed before mixing, to separate the feature-sampling streams from
/// the resampling streams.
pub const FEATURE_STREAM_SALT: u64 = 0x7472_6565_5F66_6561;

/// The seed of the feature-sampling member streams: SplitMix64's finaliser (Steele, Lea &
/// Flood 2014, "Fast splittable pseudorandom number generators", OOPSLA) applied to
/// `seed + FEATURE_STREAM_SALT` (wrapping).
pub fn feature_stream_seed(seed: u64) -> u64 {
    let mut z = seed
        .wrapping_add(FEATURE_STREAM_SALT)
        .wrapping_add(0x9E37_79B9_7F4A_7C15);
    z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
    z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
    z ^ (z >> 31)
}

/// The impurity a split reduces.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Criterion {
    /// Weighted squared error (regression).
    SquaredError,
    /// Gini impurity (classification).
    Gini,
    /// Shannon entropy (classification).
    Entropy,
}

impl Criterion {
    /// The criterion named `name`, or the task's default when `None`: squared error for
    /// regression, Gini for classification.
    ///
    /// # Errors
    /// As [`Criterion::parse`].
    pub fn parse_or_default(name: Option<&str>, task: Task) -> Result<Self> {
        match (name, task) {
            (Some(name), _) => Criterion::parse(name),
            (None, Task::Regression) => Ok(Criterion::SquaredError),
            (None, Task::Classification { .. }) => Ok(Criterion::Gini),
        }
    }

    /// Parses the user-facing name: "squared_error", "gini" or "entropy".
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "squared_error" => Ok(Criterion::SquaredError),
            "gini" => Ok(Criterion::Gini),
            "entropy" => Ok(Criterion::Entropy),
            other => Err(Error::value(
                "criterion",
                format!("expected 'squared_error', 'gini' or 'entropy', got {other:?}"),
            )),
        }
    }
}

/// How split thresholds are searched.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Splitter {
    /// Every midpoint between adjacent distinct values.
    Exact,
    /// Quantile bins computed once per fit.
    Histogram,
    /// Histogram above [`AUTO_HISTOGRAM_ABOVE`] in-node rows, exact below.
    Auto,
}

impl Splitter {
    /// Parses the user-facing name: "exact", "histogram" or "auto".
    pub fn parse(name: &str) -> Result<Self> {
        match name {
            "exact" => Ok(Splitter::Exact),
            "histogram" => Ok(Splitter::Histogram),
            "auto" => Ok(Splitter::Auto),
            other => Err(Error::value(
                "splitter",
                format!("expected 'exact', 'histogram' or 'auto', got {other:?}"),
            )),
        }
    }
}

/// Unchecked tree parameters; [`TreeParams::check`] turns them into a [`CheckedTreeParams`].
#[derive(Debug, Clone, PartialEq)]
pub struct TreeParams {
    pub task: Task,
    /// Deepest level a node may split at (root depth 0); `None` = unlimited.
    pub max_depth: Option<usize>,
    /// Minimum in-bag draws (sum of counts) in each leaf.
    pub min_leaf: u64,
    /// Features tried per node; `None` = all.
    pub split_features: Option<usize>,
    pub criterion: Criterion,
    pub splitter: Splitter,
    /// The user's seed (mixed by [`feature_stream_seed`]).
    pub seed: u64,
}

/// Checked tree parameters.
#[derive(Debug, Clone, PartialEq)]
pub struct CheckedTreeParams {
    pub(super) params: TreeParams,
}

impl TreeParams {
    /// Checks the parameters that do not depend on the data.
    ///
    /// # Errors
    /// `max_depth` or `min_leaf` or `split_features` below 1; `n_classes` below 1;
    /// `criterion` not matching the task.
    pub fn check(self) -> Result<CheckedTreeParams> {
        if self.max_depth == Some(0) {
            return Err(Error::value("max_depth", "must be at least 1 (or None)"));
        }
        if self.min_leaf == 0 {
            return Err(Error::value("min_leaf", "must be at least 1"));
        }
        if self.split_features == Some(0) {
            return Err(Error::value(
                "split_features",
                "must be at least 1 (or None)",
            ));
        }
        match (self.task, self.criterion) {
            (Task::Classification { n_classes: 0 }, _) => {
                return Err(Error::value("n_classes", "must be at least 1"))
            }
            (Task::Regression, Criterion::SquaredError)
            | (Task::Classification { .. }, Criterion::Gini | Criterion::Entropy) => {}
            (Task::Regression, _) => {
                return Err(Error::value(
                    "criterion",
                    "regression trees use 'squared_error'",
                ))
            }
            (Task::Classification { .. }, _) => {
                return Err(Error::value(
                    "criterion",
                    "classification trees use 'gini' or 'entropy'",
                ))
            }
        }
        Ok(CheckedTreeParams { params: self })
    }
}

#[cfg(test)]
mod tests {
    use super::super::test_support::*;
    use super::*;
    use crate::learners::tree::{InBag, Targets};
    use crate::parallel::Silent;
    use ndarray::{Array1, Array2};

    #[test]
    fn bad_input_names_the_argument() {
        let x = data(20, 2, 1, 0);
        let y = signal(&x, 1);
        let arg = |e: Error| match e {
            Error::InvalidValue { argument, .. } => argument,
            other => panic!("{other:?}"),
        };
        let base = params(Task::Regression, Splitter::Exact);
        let mut p = base.clone();
        p.min_leaf = 0;
        assert_eq!(arg(p.check().unwrap_err()), "min_leaf");
        let mut p = base.clone();
        p.max_depth = Some(0);
        assert_eq!(arg(p.check().unwrap_err()), "max_depth");
        let mut p = base.clone();
        p.criterion = Criterion::Gini;
        assert_eq!(arg(p.check().unwrap_err()), "criterion");
        let mut p = base.clone();
        p.split_features = Some(3);
        let config = p.check().unwrap();
        let all: InBag<'_, u8> = InBag::AllRows { members: 1 };
        let fit = |c: &CheckedTreeParams, x: &Array2<f64>, y: &Array1<f64>, b: InBag<'_, u8>| {
            c.fit(
                x.view(),
                Targets::Regression(y.view()),
                b,
                &pool(1),
                &Silent,
            )
        };
        assert_eq!(
            arg(fit(&config, &x, &y, all).unwrap_err()),
            "split_features"
        );
        let config = base.check().unwrap();
        let mut xn = x.clone();
        xn[(3, 1)] = f64::NAN;
        assert_eq!(arg(fit(&config, &xn, &y, all).unwrap_err()), "x");
        let mut yn = y.clone();
        yn[2] = f64::INFINITY;
        assert_eq!(arg(fit(&config, &x, &yn, all).unwrap_err()), "y");
        let short = y.slice(ndarray::s![..5]).to_owned();
        assert_eq!(arg(fit(&config, &x, &short, all).unwrap_err()), "y");
        let mut zero = Array2::<u8>::ones((2, 20));
        zero.row_mut(1).fill(0);
        assert_eq!(
            arg(fit(&config, &x, &y, InBag::Counts(zero.view())).unwrap_err()),
            "counts"
        );
        let narrow = Array2::<u8>::ones((2, 19));
        assert_eq!(
            arg(fit(&config, &x, &y, InBag::Counts(narrow.view())).unwrap_err()),
            "counts"
        );
        assert_eq!(
            arg(fit(&config, &x, &y, InBag::AllRows { members: 0 }).unwrap_err()),
            "members"
        );
        let classes = Array1::from_iter((0..20).map(|i| i % 4));
        let c = params(Task::Classification { n_classes: 3 }, Splitter::Exact)
            .check()
            .unwrap();
        let e = c.fit(
            x.view(),
            Targets::Classes(classes.view()),
            all,
            &pool(1),
            &Silent,
        );
        assert_eq!(arg(e.unwrap_err()), "y");
        let e = fit(&config, &x, &y, all).unwrap();
        let mut out = vec![0.0; 20];
        let wide = data(10, 3, 1, 0);
        assert_eq!(
            arg(e
                .predict_into(wide.view(), &mut out, &pool(1), &Silent)
                .unwrap_err()),
            "x"
        );
    }
}
