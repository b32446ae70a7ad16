//! The bytes of a [`TreeEnsemble`]: format 2 (written) and format 1 (still read).
//!
//! Format 2, after the 8-byte header `bgwtree\x02` (LEB128 = unsigned little-endian base-128
//! varint, at most 10 bytes; multi-byte numbers little-endian):
//!
//! ```text
//! 1        task: 0 regression, 1 classification
//! LEB128   n_classes (classification only)
//! LEB128   n_features
//! LEB128   members, then each member's tree:
//!   LEB128   node count N
//!   1        layout: 0 grown, 1 raw
//!   grown    the nodes listed depth first from the root, left child before right; the
//!            reader rebuilds the grower's array from that list alone (a node's children are
//!            appended as a pair when the node is reached, leaves numbered in the order
//!            reached), so no child index or leaf number is stored
//!     ⌈N/8⌉    internal-node bits, bit j (least significant first) for the j-th node
//!              listed; the bits past N are zero, and N = 2·(internal nodes) + 1
//!     I·w      split features of the I internal nodes in list order, w = 1, 2 or 4 bytes
//!              for n_features ≤ 2^8, ≤ 2^16, above
//!     I·8      their thresholds, the f64 bits (exact, whatever the value)
//!     L = I+1 leaves in list order (= leaf number order):
//!       regression              the f64 value, 8 bytes
//!       classes, ≤ 255 of them  1 byte b: b = k + 1 is one-hot on class k (exactly 1.0,
//!                               +0.0 elsewhere); b = 0 is followed by the n_classes f64
//!       more classes            the n_classes f64
//!   raw      any well-formed array (the grower always writes grown ones)
//!     N·16     nodes: threshold f64, feature u32, child u32
//!     LEB128   leaf value rows R, then R·width f64
//! ```
//!
//! Format 1, after `bgwtree\x01`: the postcard encoding of the ensemble (nodes with their
//! child indices and leaf numbers, about 19 bytes a node).
//!
//! Reading checks every count against the bytes left before it sizes an allocation; the
//! one expansion is a one-byte one-hot leaf into its `n_classes` (≤ 255) values.

use super::ensemble::{Node, Tree, TreeEnsemble, LEAF};
use crate::error::{Error, Result};
use crate::learners::Task;
use crate::members::MAX_CLASSES;

/// Header of format 1 (postcard), still read.
pub(super) const MAGIC_V1: &[u8; 8] = b"bgwtree\x01";
/// Header of format 2, written.
pub(super) const MAGIC: &[u8; 8] = b"bgwtree\x02";

const LAYOUT_GROWN: u8 = 0;
const LAYOUT_RAW: u8 = 1;
/// Most classes for which a one-hot leaf is written as one byte.
const ONE_HOT_CLASSES: usize = 255;

fn corrupt(what: impl std::fmt::Display) -> Error {
    Error::value("data", format!("corrupt tree ensemble: {what}"))
}

/// Bytes to write, or only counted when there is no buffer.
struct Output<'a> {
    out: Option<&'a mut [u8]>,
    at: usize,
}

impl Output<'_> {
    #[inline]
    fn put(&mut self, bytes: &[u8]) {
        if let Some(out) = self.out.as_deref_mut() {
            out[self.at..self.at + bytes.len()].copy_from_slice(bytes);
        }
        self.at += bytes.len();
    }

    fn varint(&mut self, mut value: u64) {
        let mut buffer = [0u8; 10];
        let mut len = 0;
        loop {
            let low = (value & 0x7F) as u8;
            value >>= 7;
            if value == 0 {
                buffer[len] = low;
                len += 1;
                break;
            }
            buffer[len] = low | 0x80;
            len += 1;
        }
        self.put(&buffer[..len]);
    }

    fn f64(&mut self, value: f64) {
        self.put(&value.to_bits().to_le_bytes());
    }
}

/// Bytes of one split feature for `n_features` features.
fn feature_width(n_features: usize) -> usize {
    match n_features {
        0..=0x100 => 1,
        0x101..=0x1_0000 => 2,
        _ => 4,
    }
}

/// The grown-layout list of `tree`'s node indices (depth first, left before right) into
/// `order`, or `false` when the array is not the one the reader would rebuild from that list
/// (the tree is then written raw).
fn grown_order(tree: &Tree, width: usize, n_features: usize, order: &mut Vec<u32>) -> bool {
    order.clear();
    let n = tree.nodes.len();
    let (mut next_child, mut next_leaf) = (1usize, 0usize);
    let mut stack = vec![0u32];
    while let Some(k) = stack.pop() {
        if order.len() == n {
            return false;
        }
        order.push(k);
        let node = tree.nodes[k as usize];
        let c = node.child as usize;
        if node.feature == LEAF {
            if c != next_leaf {
                return false;
            }
            next_leaf += 1;
        } else {
            if c != next_child || c + 1 >= n || node.feature as usize >= n_features {
                return false;
            }
            next_child += 2;
            stack.extend([node.child + 1, node.child]);
        }
    }
    next_child == n && order.len() == n && Some(tree.values.len()) == next_leaf.checked_mul(width)
}

/// The class `k` of a leaf that is exactly one-hot on it (1.0 there, +0.0 elsewhere).
fn one_hot(leaf: &[f64]) -> Option<usize> {
    let k = leaf.iter().position(|v| v.to_bits() == 1f64.to_bits())?;
    leaf.iter()
        .enumerate()
        .all(|(j, v)| j == k || v.to_bits() == 0)
        .then_some(k)
}

impl TreeEnsemble {
    /// Length of [`encode_into`](TreeEnsemble::encode_into)'s output.
    pub fn encoded_len(&self) -> usize {
        let mut output = Output { out: None, at: 0 };
        self.encode(&mut output);
        output.at
    }

    /// Writes the format-2 bytes into `out`, which must be
    /// [`encoded_len`](TreeEnsemble::encoded_len) bytes long.
    ///
    /// # Panics
    /// When `out` has another length.
    pub fn encode_into(&self, out: &mut [u8]) {
        let len = out.len();
        let mut output = Output {
            out: Some(out),
            at: 0,
        };
        self.encode(&mut output);
        assert_eq!(output.at, len, "buffer of the wrong length");
    }

    fn encode(&self, out: &mut Output<'_>) {
        out.put(MAGIC);
        let n_classes = match self.task {
            Task::Regression => None,
            Task::Classification { n_classes } => Some(n_classes),
        };
        out.put(&[u8::from(n_classes.is_some())]);
        if let Some(n_classes) = n_classes {
            out.varint(n_classes as u64);
        }
        out.varint(self.n_features as u64);
        out.varint(self.trees.len() as u64);
        let width = self.outputs();
        let feature_bytes = feature_width(self.n_features);
        let mut order = Vec::new();
        for tree in &self.trees {
            out.varint(tree.nodes.len() as u64);
            if !grown_order(tree, width, self.n_features, &mut order) {
                out.put(&[LAYOUT_RAW]);
                for node in &tree.nodes {
                    out.f64(node.threshold);
                    out.put(&node.feature.to_le_bytes());
                    out.put(&node.child.to_le_bytes());
                }
                out.varint((tree.values.len() / width) as u64);
                tree.values.iter().for_each(|&v| out.f64(v));
                continue;
            }
            out.put(&[LAYOUT_GROWN]);
            let internal = |k: &u32| tree.nodes[*k as usize].feature != LEAF;
            for list in order.chunks(8) {
                let bits = list
                    .iter()
                    .rev()
                    .fold(0u8, |b, k| b << 1 | u8::from(internal(k)));
                out.put(&[bits]);
            }
            for k in order.iter().filter(|k| internal(k)) {
                let feature = tree.nodes[*k as usize].feature.to_le_bytes();
                out.put(&feature[..feature_bytes]);
            }
            for k in order.iter().filter(|k| internal(k)) {
                out.f64(tree.nodes[*k as usize].threshold);
            }
            for leaf in tree.values.chunks_exact(width) {
                match n_classes {
                    None => out.f64(leaf[0]),
                    Some(c) if c <= ONE_HOT_CLASSES => match one_hot(leaf) {
                        Some(k) => out.put(&[k as u8 + 1]),
                        None => {
                            out.put(&[0]);
                            leaf.iter().for_each(|&v| out.f64(v));
                        }
                    },
                    Some(_) => leaf.iter().for_each(|&v| out.f64(v)),
                }
            }
        }
    }

    /// Reads the bytes of either format and checks every index, so a corrupted buffer is an
    /// error and never a crash at prediction time.
    pub(super) fn decode(data: &[u8]) -> Result<Self> {
        let ensemble = if let Some(body) = data.strip_prefix(MAGIC.as_slice()) {
            decode_v2(body)?
        } else if let Some(body) = data.strip_prefix(MAGIC_V1.as_slice()) {
            decode_v1(body)?
        } else if data.len() >= MAGIC.len() && data.starts_with(b"bgwtree") {
            return Err(Error::value(
                "data",
                format!(
                    "uses tree format {}, but this bagwise reads formats 1 and 2",
                    data[7]
                ),
            ));
        } else {
            return Err(Error::value(
                "data",
                "not a bagwise tree ensemble (bad header)",
            ));
        };
        ensemble.validate()?;
        Ok(ensemble)
    }
}

fn decode_v1(body: &[u8]) -> Result<TreeEnsemble> {
    let (ensemble, rest): (TreeEnsemble, &[u8]) =
        postcard::take_from_bytes(body).map_err(corrupt)?;
    if !rest.is_empty() {
        return Err(corrupt("trailing bytes after the tree ensemble"));
    }
    Ok(ensemble)
}

/// Bytes being read; every read names the field it is for.
struct Input<'a> {
    data: &'a [u8],
    at: usize,
}

impl<'a> Input<'a> {
    fn left(&self) -> usize {
        self.data.len() - self.at
    }

    fn take(&mut self, len: usize, field: &dyn std::fmt::Display) -> Result<&'a [u8]> {
        if len > self.left() {
            return Err(corrupt(format_args!(
                "{field} needs {len} bytes but {} remain",
                self.left()
            )));
        }
        self.at += len;
        Ok(&self.data[self.at - len..self.at])
    }

    fn byte(&mut self, field: &dyn std::fmt::Display) -> Result<u8> {
        Ok(self.take(1, field)?[0])
    }

    fn varint(&mut self, field: &dyn std::fmt::Display) -> Result<u64> {
        let mut value = 0u64;
        for shift in (0..64).step_by(7) {
            let byte = self.byte(field)?;
            let bits = u64::from(byte & 0x7F);
            if shift == 63 && bits > 1 {
                break;
            }
            value |= bits << shift;
            if byte & 0x80 == 0 {
                return Ok(value);
            }
        }
        Err(corrupt(format_args!("{field} overflows 64 bits")))
    }

    /// A count of at most `max`.
    fn count(&mut self, field: &dyn std::fmt::Display, max: usize) -> Result<usize> {
        let raw = self.varint(field)?;
        match usize::try_from(raw) {
            Ok(count) if count <= max => Ok(count),
            _ => Err(corrupt(format_args!("{field} is {raw}, above {max}"))),
        }
    }

    fn f64s(&mut self, count: usize, field: &dyn std::fmt::Display) -> Result<Vec<f64>> {
        Ok(self
            .take(byte_count(count, 8, field)?, field)?
            .chunks_exact(8)
            .map(|b| f64::from_le_bytes(b.try_into().expect("8 bytes")))
            .collect())
    }
}

/// `count` items of `size` bytes, an error when that overflows (32-bit targets).
fn byte_count(count: usize, size: usize, field: &dyn std::fmt::Display) -> Result<usize> {
    count.checked_mul(size).ok_or_else(|| {
        corrupt(format_args!(
            "{field}: {count} items overflow the address space"
        ))
    })
}

fn decode_v2(body: &[u8]) -> Result<TreeEnsemble> {
    let mut input = Input { data: body, at: 0 };
    let task = match input.byte(&"the task")? {
        0 => Task::Regression,
        1 => Task::Classification {
            n_classes: input.count(&"n_classes", MAX_CLASSES)?,
        },
        other => return Err(corrupt(format_args!("unknown task {other}"))),
    };
    let width = task.outputs();
    if width == 0 {
        return Err(corrupt("n_classes is 0"));
    }
    let n_features = input.count(&"n_features", LEAF as usize)?;
    let members = input.count(&"the member count", usize::MAX)?;
    let mut trees = Vec::new();
    for m in 0..members {
        trees.push(decode_tree(&mut input, m, task, n_features)?);
    }
    if input.left() != 0 {
        return Err(corrupt("trailing bytes after the last member"));
    }
    Ok(TreeEnsemble {
        task,
        n_features,
        trees,
    })
}

fn decode_tree(input: &mut Input<'_>, m: usize, task: Task, n_features: usize) -> Result<Tree> {
    let field = |name: &str| format!("member {m}: {name}");
    let width = task.outputs();
    let n = input.count(&field("the node count"), LEAF as usize)?;
    match input.byte(&field("the layout"))? {
        LAYOUT_RAW => {
            let raw = input.take(
                byte_count(n, 16, &field("the raw nodes"))?,
                &field("the raw nodes"),
            )?;
            let nodes = raw
                .chunks_exact(16)
                .map(|b| Node {
                    threshold: f64::from_le_bytes(b[..8].try_into().expect("8 bytes")),
                    feature: u32::from_le_bytes(b[8..12].try_into().expect("4 bytes")),
                    child: u32::from_le_bytes(b[12..].try_into().expect("4 bytes")),
                })
                .collect();
            let rows = input.count(&field("the leaf value rows"), usize::MAX)?;
            let count = rows
                .checked_mul(width)
                .ok_or_else(|| corrupt(field("too many leaf value rows")))?;
            let values = input.f64s(count, &field("the leaf values"))?;
            Ok(Tree { nodes, values })
        }
        LAYOUT_GROWN => decode_grown(input, &field, n, task, n_features),
        other => Err(corrupt(field(&format!("unknown layout {other}")))),
    }
}

fn decode_grown(
    input: &mut Input<'_>,
    field: &dyn Fn(&str) -> String,
    n: usize,
    task: Task,
    n_features: usize,
) -> Result<Tree> {
    let flags = input.take(n.div_ceil(8), &field("the internal-node bits"))?;
    let internal: usize = flags.iter().map(|b| b.count_ones() as usize).sum();
    if !n.is_multiple_of(8) && flags[n / 8] >> (n % 8) != 0 {
        return Err(corrupt(field("internal-node bits set past the node count")));
    }
    if n != 2 * internal + 1 {
        return Err(corrupt(field(&format!(
            "the node count {n} with {internal} internal nodes is not a binary tree"
        ))));
    }
    let feature_bytes = feature_width(n_features);
    let features = field("the split features");
    let features = input.take(byte_count(internal, feature_bytes, &features)?, &features)?;
    let thresholds = field("the thresholds");
    let thresholds = input.take(byte_count(internal, 8, &thresholds)?, &thresholds)?;
    let leaves = internal + 1;
    // Every leaf takes at least one byte: the node array below is backed by bytes present.
    if input.left() < leaves {
        return Err(corrupt(field("the leaves are cut short")));
    }
    let mut nodes = vec![Node::PLACEHOLDER; 1];
    nodes.reserve_exact(n - 1);
    let mut stack = vec![0u32];
    let (mut split, mut leaf) = (0usize, 0u32);
    for j in 0..n {
        let Some(k) = stack.pop() else {
            return Err(corrupt(field(
                "the internal-node bits end the tree before the node count",
            )));
        };
        if flags[j / 8] >> (j % 8) & 1 == 0 {
            nodes[k as usize].child = leaf;
            leaf += 1;
            continue;
        }
        let mut feature = [0u8; 4];
        feature[..feature_bytes]
            .copy_from_slice(&features[split * feature_bytes..(split + 1) * feature_bytes]);
        let threshold = &thresholds[split * 8..(split + 1) * 8];
        split += 1;
        let child = nodes.len() as u32;
        nodes[k as usize] = Node {
            threshold: f64::from_le_bytes(threshold.try_into().expect("8 bytes")),
            feature: u32::from_le_bytes(feature),
            child,
        };
        nodes.extend([Node::PLACEHOLDER; 2]);
        stack.extend([child + 1, child]);
    }
    let values = match task {
        Task::Regression => input.f64s(leaves, &field("the leaf values"))?,
        Task::Classification { n_classes } if n_classes <= ONE_HOT_CLASSES => {
            let mut values = Vec::with_capacity(leaves * n_classes);
            for l in 0..leaves {
                match input.byte(&field("a leaf's form"))? {
                    0 => values.extend(input.f64s(n_classes, &field("a leaf's values"))?),
                    b if usize::from(b) <= n_classes => {
                        let start = values.len();
                        values.resize(start + n_classes, 0.0);
                        values[start + usize::from(b) - 1] = 1.0;
                    }
                    b => {
                        return Err(corrupt(field(&format!(
                            "leaf {l} is one-hot on class {} of {n_classes}",
                            b - 1
                        ))))
                    }
                }
            }
            values
        }
        Task::Classification { n_classes } => {
            let count = leaves
                .checked_mul(n_classes)
                .ok_or_else(|| corrupt(field("too many leaf values")))?;
            input.f64s(count, &field("the leaf values"))?
        }
    };
    Ok(Tree { nodes, values })
}

#[cfg(test)]
mod tests {
    use super::super::test_support::*;
    use super::*;
    use crate::learners::FittedMembers;
    use crate::persistence::Container;
    use ndarray::Array2;

    /// Format 1 as the previous version wrote it: postcard behind its header.
    fn to_bytes_v1(e: &TreeEnsemble) -> Vec<u8> {
        let mut out = MAGIC_V1.to_vec();
        out.extend(postcard::to_allocvec(e).unwrap());
        out
    }

    fn split(threshold: f64, feature: u32, child: u32) -> Node {
        Node {
            threshold,
            feature,
            child,
        }
    }

    fn leaf(number: u32) -> Node {
        Node {
            threshold: 0.0,
            feature: LEAF,
            child: number,
        }
    }

    /// A grower-layout tree with a deep left side: the root's right child (node 2) is
    /// reached after the left subtree, so its leaf number (3) is not in node order.
    fn unbalanced(t: [f64; 3], features: [u32; 3], values: Vec<f64>) -> Tree {
        Tree {
            nodes: vec![
                split(t[0], features[0], 1),
                split(t[1], features[1], 3),
                leaf(3),
                leaf(0),
                split(t[2], features[2], 5),
                leaf(1),
                leaf(2),
            ],
            values,
        }
    }

    fn fitted(task: Task, rows: usize, members: usize, max_depth: Option<usize>) -> TreeEnsemble {
        let x = data(rows, 4, 7, 0);
        let y = signal(&x, 8);
        let mut p = params(task, Splitter::Auto);
        p.max_depth = max_depth;
        let mut counts = Array2::<u8>::zeros((members, rows));
        let mut d = Draws::from_seed(9);
        for m in 0..members {
            d.for_each_below(rows, rows, |i| counts[(m, i)] += 1);
        }
        let n_classes = task.outputs();
        let classes: Vec<usize> = y
            .iter()
            .map(|v| ((v + 1.0).max(0.0) * n_classes as f64 / 3.0) as usize % n_classes)
            .collect();
        let targets = match task {
            Task::Regression => Targets::Regression(y.view()),
            Task::Classification { .. } => Targets::Classes(classes.as_slice().into()),
        };
        p.check()
            .unwrap()
            .fit(
                x.view(),
                targets,
                InBag::Counts(counts.view()),
                &pool(2),
                &Silent,
            )
            .unwrap()
    }

    #[test]
    fn fitted_ensembles_round_trip_exactly_in_both_formats() {
        for (task, depth) in [
            (Task::Regression, None),
            (Task::Regression, Some(3)),
            (Task::Classification { n_classes: 2 }, None),
            (Task::Classification { n_classes: 3 }, Some(4)),
            (Task::Classification { n_classes: 300 }, Some(5)),
        ] {
            let e = fitted(task, 400, 4, depth);
            let bytes = e.to_bytes();
            assert_eq!(bytes.len(), e.encoded_len());
            assert!(bytes.starts_with(MAGIC));
            let back = TreeEnsemble::from_bytes(&bytes).unwrap();
            // Node arrays, child indices, leaf numbers and value bits all equal the grower's.
            assert_eq!(back, e, "{task:?} {depth:?}");
            let bits = |e: &TreeEnsemble| -> Vec<u64> {
                e.trees()
                    .iter()
                    .flat_map(|t| t.nodes.iter().map(|n| n.threshold.to_bits()))
                    .chain(
                        e.trees()
                            .iter()
                            .flat_map(|t| t.values.iter().map(|v| v.to_bits())),
                    )
                    .collect()
            };
            assert_eq!(bits(&back), bits(&e));
            assert_eq!(TreeEnsemble::from_bytes(&to_bytes_v1(&e)).unwrap(), e);
            assert!(bytes.len() < to_bytes_v1(&e).len());
        }
    }

    #[test]
    fn grown_regression_trees_cost_the_documented_bytes() {
        // The module's table: per tree a node-count LEB128, the layout byte, ⌈N/8⌉ bits,
        // 1 + 8 bytes per internal node (4 features), 8 per leaf.
        let e = fitted(Task::Regression, 500, 3, None);
        let leb = |v: usize| (usize::BITS - v.max(1).leading_zeros()).div_ceil(7) as usize;
        let mut expected = 8 + 1 + 1 + 1;
        for t in e.trees() {
            let n = t.nodes.len();
            let internal = (n - 1) / 2;
            expected += leb(n) + 1 + n.div_ceil(8) + internal * 9 + (internal + 1) * 8;
        }
        assert_eq!(e.to_bytes().len(), expected);
    }

    #[test]
    fn thresholds_keep_every_bit() {
        let hard = [
            0.1 + 0.2,
            f64::from_bits(1), // the least subnormal
            -f64::MIN_POSITIVE / 3.0,
            -0.0,
            1.0 + f64::EPSILON, // not representable in f32
            f64::MAX,
            f64::INFINITY,
            -1e-300,
            std::f64::consts::PI,
        ];
        let mut trees = Vec::new();
        for pair in hard.windows(3) {
            trees.push(unbalanced(
                [pair[0], pair[1], pair[2]],
                [0, 1, 2],
                vec![
                    pair[1].clamp(-1e300, 1e300),
                    -0.0,
                    f64::from_bits(3),
                    0.1 + 0.2,
                ],
            ));
        }
        let e = TreeEnsemble {
            task: Task::Regression,
            n_features: 3,
            trees,
        };
        e.validate().unwrap();
        let back = TreeEnsemble::from_bytes(&e.to_bytes()).unwrap();
        for (a, b) in back.trees().iter().zip(e.trees()) {
            for (x, y) in a.nodes.iter().zip(&b.nodes) {
                assert_eq!(x.threshold.to_bits(), y.threshold.to_bits());
            }
            let av: Vec<u64> = a.values.iter().map(|v| v.to_bits()).collect();
            let bv: Vec<u64> = b.values.iter().map(|v| v.to_bits()).collect();
            assert_eq!(av, bv);
        }
        // Points on either side of each threshold by one ulp take the same branches.
        let mut points = Vec::new();
        for &t in &hard {
            for v in [
                t,
                f64::from_bits(t.to_bits() + 1),
                f64::from_bits(t.to_bits().max(1) - 1),
            ] {
                if v.is_finite() {
                    points.extend([v, v, v]);
                }
            }
        }
        let x = Array2::from_shape_vec((points.len() / 3, 3), points).unwrap();
        assert_eq!(members(&back, &x), members(&e, &x));
    }

    #[test]
    fn children_and_leaf_numbers_decode_to_the_grower_layout() {
        // Written out by hand from the grower's rule (children appended as a pair when the
        // parent is split, depth first, left first; leaves numbered in that order).
        let tree = unbalanced([0.5, 0.25, 0.75], [2, 0, 1], vec![10.0, 11.0, 12.0, 13.0]);
        let e = TreeEnsemble {
            task: Task::Regression,
            n_features: 3,
            trees: vec![tree.clone()],
        };
        let bytes = e.to_bytes();
        // Grown layout: no child index or leaf number is stored.
        assert_eq!(bytes.len(), 8 + 3 + 1 + 1 + 1 + 3 * 9 + 4 * 8);
        let back = TreeEnsemble::from_bytes(&bytes).unwrap();
        assert_eq!(back.trees()[0].nodes, tree.nodes);
        // Root: feature 2 ≤ 0.5 → node 1 (feature 0 ≤ 0.25 → leaf 0, else node 4: feature 1
        // ≤ 0.75 → leaf 1, else leaf 2); feature 2 > 0.5 → node 2, leaf 3.
        let x = ndarray::array![
            [0.1, 0.0, 0.4],
            [0.9, 0.9, 0.4],
            [0.9, 0.1, 0.4],
            [0.1, 0.1, 0.8]
        ];
        assert_eq!(members(&back, &x), vec![10.0, 12.0, 11.0, 13.0]);
    }

    #[test]
    fn arrays_not_in_grower_layout_are_written_raw_and_round_trip() {
        let grown = unbalanced([0.5, 0.25, 0.75], [2, 0, 1], vec![1.0, 2.0, 3.0, 4.0]);
        let mut renumbered = grown.clone();
        renumbered.nodes[3].child = 2; // leaves numbered out of the walk's order
        renumbered.nodes[6].child = 0;
        let mut shared = grown.clone();
        shared.nodes[2].child = 0; // two leaves share a value row
        let mut spaced = grown.clone();
        spaced.nodes[1].child = 4; // a gap: node 3 unreachable
        spaced.nodes[4].child = 5;
        spaced.nodes.swap(3, 4);
        spaced.nodes[4] = leaf(0);
        spaced.nodes[3] = leaf(3);
        for tree in [renumbered, shared, spaced] {
            let e = TreeEnsemble {
                task: Task::Regression,
                n_features: 3,
                trees: vec![tree, grown.clone()],
            };
            e.validate().unwrap();
            let bytes = e.to_bytes();
            assert_eq!(TreeEnsemble::from_bytes(&bytes).unwrap(), e);
        }
    }

    #[test]
    fn wide_feature_indices_and_class_leaves_round_trip() {
        for n_features in [256, 257, 65_536, 65_537, 70_000] {
            let last = n_features as u32 - 1;
            let e = TreeEnsemble {
                task: Task::Classification { n_classes: 3 },
                n_features,
                trees: vec![unbalanced(
                    [0.5, -0.0, 2.0],
                    [last, 0, last - 1],
                    vec![
                        1.0, 0.0, 0.0, // one-hot
                        0.0, 0.0, 1.0, // one-hot
                        -0.0, 1.0, 0.0, // -0.0 is not one-hot: kept raw
                        0.25, 0.5, 0.25,
                    ],
                )],
            };
            e.validate().unwrap();
            let back = TreeEnsemble::from_bytes(&e.to_bytes()).unwrap();
            assert_eq!(back, e);
            assert_eq!(back.trees()[0].values[6].to_bits(), (-0.0f64).to_bits());
        }
    }

    #[test]
    fn corrupt_bytes_are_errors_naming_data() {
        let e = fitted(Task::Classification { n_classes: 3 }, 120, 2, Some(3));
        let bytes = e.to_bytes();
        for cut in 0..bytes.len() {
            let err = TreeEnsemble::from_bytes(&bytes[..cut]).unwrap_err();
            assert!(err.to_string().starts_with("`data`: "), "{err}");
        }
        for at in 0..bytes.len() {
            for byte in [0x00, 0x01, 0x02, 0x7F, 0x80, 0xFF] {
                let mut bad = bytes.clone();
                bad[at] = byte;
                match TreeEnsemble::from_bytes(&bad) {
                    Ok(back) => back.validate().unwrap(),
                    Err(err) => assert!(err.to_string().starts_with("`data`: "), "{err}"),
                }
            }
        }
        let mut newer = bytes.clone();
        newer[7] = 3;
        let err = TreeEnsemble::from_bytes(&newer).unwrap_err().to_string();
        assert!(err.contains("tree format 3"), "{err}");
        let mut extra = bytes;
        extra.push(0);
        assert!(TreeEnsemble::from_bytes(&extra).is_err());
    }

    #[test]
    fn huge_counts_are_refused_before_anything_is_allocated() {
        // task, n_features 3, members 1, then a node count of 2^32 + 1 and 2^40
        for count in [
            &[0x81, 0x80, 0x80, 0x80, 0x10][..],
            &[0x80, 0x80, 0x80, 0x80, 0x80, 0x20],
        ] {
            let mut bytes = MAGIC.to_vec();
            bytes.extend([0, 3, 1]);
            bytes.extend(count);
            bytes.extend([LAYOUT_GROWN, 0xFF]);
            let err = TreeEnsemble::from_bytes(&bytes).unwrap_err().to_string();
            assert!(err.contains("member 0: the node count"), "{err}");
        }
        // a billion nodes whose bits are not there
        let mut bytes = MAGIC.to_vec();
        bytes.extend([0, 3, 1, 0x80, 0x94, 0xEB, 0xDC, 0x03, LAYOUT_GROWN, 0x01]);
        let err = TreeEnsemble::from_bytes(&bytes).unwrap_err().to_string();
        assert!(err.contains("internal-node bits needs"), "{err}");
        // raw nodes and value rows past the end
        let mut bytes = MAGIC.to_vec();
        bytes.extend([0, 3, 1, 0x80, 0x80, 0x04, LAYOUT_RAW]);
        let err = TreeEnsemble::from_bytes(&bytes).unwrap_err().to_string();
        assert!(err.contains("raw nodes needs"), "{err}");
    }

    #[test]
    fn malformed_trees_name_the_member_and_the_field() {
        let cases: [(&[u8], &str); 5] = [
            (&[0, 3, 1, 1, 7], "member 0: unknown layout 7"),
            (&[0, 3, 1, 1, LAYOUT_GROWN, 0x02], "set past the node count"),
            (
                &[0, 3, 1, 3, LAYOUT_GROWN, 0x00],
                "node count 3 with 0 internal",
            ),
            (
                &[1, 2, 3, 1, 1, LAYOUT_GROWN, 0x00, 3],
                "leaf 0 is one-hot on class 2 of 2",
            ),
            // five nodes, two internal, but the first listed is a leaf: the tree ends there
            (
                &[0, 3, 1, 5, LAYOUT_GROWN, 0b0_0110],
                "end the tree before the node count",
            ),
        ];
        for (body, expected) in cases {
            let mut bytes = MAGIC.to_vec();
            bytes.extend(body);
            bytes.extend([0u8; 2 + 16 + 3 * 8]); // features, thresholds, leaves
            let err = TreeEnsemble::from_bytes(&bytes).unwrap_err().to_string();
            assert!(
                err.starts_with("`data`: ") && err.contains(expected),
                "{err}"
            );
        }
    }

    #[test]
    fn the_committed_format_1_file_reads_as_written() {
        // Written by tests/data/make_tree_v1_files.py with the version that wrote format 1.
        let file = include_bytes!("../../../tests/data/tree_v1_regression.bagwise");
        let container = Container::from_bytes(file).unwrap();
        assert!(container.payload.starts_with(MAGIC_V1));
        let old = <TreeEnsemble as FittedMembers>::from_bytes(&container.payload).unwrap();
        // Its postcard bytes are the previous encoder's output, and format 2 keeps it whole.
        assert_eq!(to_bytes_v1(&old), container.payload);
        assert_eq!(TreeEnsemble::from_bytes(&old.to_bytes()).unwrap(), old);
    }
}
