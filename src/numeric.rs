//! Numeric building blocks shared by the diagnostics: the input float trait and mergeable
//! moment accumulators.

/// An input element type: predictions arrive as f32 or f64 and are read without an
/// upcasting copy; all accumulation is done in f64.
pub trait Real: Copy + Send + Sync + 'static {
    /// Widens to f64.
    fn to_f64(self) -> f64;
}

impl Real for f32 {
    #[inline]
    fn to_f64(self) -> f64 {
        f64::from(self)
    }
}

impl Real for f64 {
    #[inline]
    fn to_f64(self) -> f64 {
        self
    }
}

/// Count, mean and sum of squared deviations of a stream of values, mergeable across
/// chunks.
///
/// ```text
/// Chan, Golub & LeVeque (1983), "Algorithms for computing the sample variance",
/// The American Statistician 37(3). Merging (n_a, mean_a, M2_a) with (n_b, mean_b, M2_b):
///   n    = n_a + n_b
///   δ    = mean_b − mean_a
///   mean = mean_a + δ · n_b / n
///   M2   = M2_a + M2_b + δ² · n_a · n_b / n
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Default, serde::Serialize, serde::Deserialize)]
pub struct Moments {
    count: u64,
    mean: f64,
    sum_squared_deviations: f64,
}

impl Moments {
    /// Adds one value (Welford's update, the one-element case of the merge).
    #[inline]
    pub fn push(&mut self, value: f64) {
        self.count += 1;
        let delta = value - self.mean;
        self.mean += delta / self.count as f64;
        self.sum_squared_deviations += delta * (value - self.mean);
    }

    /// Moments of a whole slice: two passes (mean, then deviations) for accuracy.
    pub fn of_slice(values: &[f64]) -> Self {
        if values.is_empty() {
            return Moments::default();
        }
        let mean = values.iter().sum::<f64>() / values.len() as f64;
        let sum_squared_deviations = values.iter().map(|v| (v - mean) * (v - mean)).sum();
        Moments {
            count: values.len() as u64,
            mean,
            sum_squared_deviations,
        }
    }

    /// Combines two accumulators as if all values had been pushed into one.
    pub fn merge(&self, other: &Moments) -> Moments {
        if self.count == 0 {
            return *other;
        }
        if other.count == 0 {
            return *self;
        }
        let count = self.count + other.count;
        let delta = other.mean - self.mean;
        let (na, nb, n) = (self.count as f64, other.count as f64, count as f64);
        Moments {
            count,
            mean: self.mean + delta * nb / n,
            sum_squared_deviations: self.sum_squared_deviations
                + other.sum_squared_deviations
                + delta * delta * na * nb / n,
        }
    }

    /// Number of values.
    pub fn count(&self) -> u64 {
        self.count
    }

    /// Mean (NaN when empty).
    pub fn mean(&self) -> f64 {
        if self.count == 0 {
            f64::NAN
        } else {
            self.mean
        }
    }

    /// Variance with `ddof` delta degrees of freedom (NaN when count ≤ ddof).
    pub fn variance(&self, ddof: u64) -> f64 {
        if self.count <= ddof {
            f64::NAN
        } else {
            self.sum_squared_deviations / (self.count - ddof) as f64
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    #[test]
    fn merged_chunks_equal_one_pass() {
        let values: Vec<f64> = (0..1000)
            .map(|i| ((i * 37) % 101) as f64 * 0.5 + 1e6)
            .collect();
        let whole = Moments::of_slice(&values);
        let merged = values
            .chunks(77)
            .map(Moments::of_slice)
            .fold(Moments::default(), |acc, m| acc.merge(&m));
        let mut pushed = Moments::default();
        values.iter().for_each(|&v| pushed.push(v));
        assert_eq!(merged.count(), 1000);
        assert_relative_eq!(merged.mean(), whole.mean(), max_relative = 1e-14);
        assert_relative_eq!(merged.variance(1), whole.variance(1), max_relative = 1e-10);
        assert_relative_eq!(pushed.variance(1), whole.variance(1), max_relative = 1e-10);
    }

    #[test]
    fn empty_and_single_values_give_nan() {
        assert!(Moments::default().mean().is_nan());
        let one = Moments::of_slice(&[3.0]);
        assert_eq!(one.mean(), 3.0);
        assert!(one.variance(1).is_nan());
        assert_eq!(one.variance(0), 0.0);
    }
}
