//! Joining the parts of a batch measured apart (`measure --shard K/N`, run
//! as N jobs on one machine or several) into the report one run over the
//! whole batch writes: the images in the batch's input order, the files
//! passed over, and the summary and the spec's verdicts computed again from
//! all the images (a pooled zone pools fields from every part). Apart from
//! `created_utc` the joined report is the one a single run gives.
//!
//! The parts are checked before anything is joined: one report schema and
//! one tool version, the same parameters (a part measured otherwise would
//! not belong to the batch), every part of 1..N exactly once, none
//! interrupted, and each holding the images its index takes.

use super::{
    assemble_from, BatchImage, ImageReport, Parameters, Report, ShardParameters, SkippedReport,
    SCHEMA,
};
use serde::Deserialize;

/// One part's report, as read back.
#[derive(Deserialize, Debug)]
pub struct Part {
    schema: String,
    tool: PartTool,
    parameters: Parameters,
    images: Vec<ImageReport>,
    skipped: Vec<SkippedReport>,
    summary: PartSummary,
}

#[derive(Deserialize, Debug)]
struct PartTool {
    name: String,
    version: String,
}

#[derive(Deserialize, Debug)]
struct PartSummary {
    partial: bool,
    from_journal: usize,
}

impl Part {
    /// A part from the text of its report; the error says what is wrong
    /// (the caller names the file).
    pub fn parse(text: &str) -> Result<Self, String> {
        let part: Part = serde_json::from_str(text)
            .map_err(|e| format!("not an armspace report that can be joined: {e}"))?;
        if part.schema != SCHEMA || part.tool.name != env!("CARGO_PKG_NAME") {
            return Err(format!(
                "not an armspace report of schema {SCHEMA} (it says {} {})",
                part.tool.name, part.schema
            ));
        }
        if part.tool.version != env!("CARGO_PKG_VERSION") {
            return Err(format!(
                "written by armspace {}, and this is {}: measure every part, and join them, with one version",
                part.tool.version,
                env!("CARGO_PKG_VERSION")
            ));
        }
        Ok(part)
    }

    /// The part's place in its batch, when it is a part.
    pub fn shard(&self) -> Option<ShardParameters> {
        self.parameters.shard
    }
}

/// How many of `total` images, taken in input order, fall to part `index`
/// (1-based) of `count`: image i goes to part i mod count + 1.
pub fn images_of_part(total: usize, index: usize, count: usize) -> usize {
    if index == 0 || index > count || total < index {
        return 0;
    }
    // Images index - 1, index - 1 + count, ... below total (no sum that
    // could overflow on a count or total read from a report).
    (total - index) / count + 1
}

/// Whether image `i` (0-based, in the batch's input order, files passed
/// over not counted) falls to part `index` (1-based) of `count`.
pub fn in_part(i: usize, index: usize, count: usize) -> bool {
    count > 0 && i % count + 1 == index
}

/// The joined report of the named parts (any order), or what stops the
/// join, naming the part.
pub fn merge(parts: Vec<(String, Part)>, created_utc: String) -> Result<Report, String> {
    let Some((first_name, first)) = parts.first() else {
        return Err("no reports to join".into());
    };
    let shard_of = |name: &str, p: &Part| {
        p.shard().ok_or_else(|| {
            format!("{name}: not a part of a split batch (its parameters have no `shard`): it holds a whole batch already")
        })
    };
    let head = shard_of(first_name, first)?;
    let reference = comparable(&first.parameters)?;
    // Part index -> position in `parts`. A map, not a vector of `count`
    // slots: the count is read from a report and may be absurd.
    let mut slots: std::collections::BTreeMap<usize, usize> = std::collections::BTreeMap::new();
    for (k, (name, p)) in parts.iter().enumerate() {
        let s = shard_of(name, p)?;
        if s.count != head.count || s.batch_images != head.batch_images {
            return Err(format!(
                "{name}: part {}/{} of a batch of {} images, but {first_name} is part {}/{} of a batch of {}: they are not parts of one batch",
                s.index, s.count, s.batch_images, head.index, head.count, head.batch_images
            ));
        }
        if let Some(key) = first_difference(&reference, &comparable(&p.parameters)?) {
            return Err(format!(
                "{name}: measured with other parameters than {first_name} (`parameters.{key}` differs): it does not belong to the same batch"
            ));
        }
        if p.summary.partial {
            return Err(format!(
                "{name}: part {}/{} is partial (its run was interrupted): finish it (the same command with --resume) before joining",
                s.index, s.count
            ));
        }
        if s.index == 0 || s.index > s.count {
            return Err(format!(
                "{name}: part {}/{} does not exist",
                s.index, s.count
            ));
        }
        if let Some(other) = slots.insert(s.index, k) {
            return Err(format!(
                "{name} and {} are both part {}/{}",
                parts[other].0, s.index, s.count
            ));
        }
        let expected = images_of_part(s.batch_images, s.index, s.count);
        if p.images.len() != expected {
            return Err(format!(
                "{name}: part {}/{} of a batch of {} images should hold {expected} images and holds {}",
                s.index,
                s.count,
                s.batch_images,
                p.images.len()
            ));
        }
    }
    if slots.len() < head.count {
        // The first twenty missing parts named (a count read from a report
        // may be absurd; the list stays short).
        let missing: Vec<String> = (1..=head.count)
            .filter(|i| !slots.contains_key(i))
            .take(20)
            .map(|i| format!("{i}/{}", head.count))
            .collect();
        let more = if head.count - slots.len() > missing.len() {
            format!(" and {} more", head.count - slots.len() - missing.len())
        } else {
            String::new()
        };
        return Err(format!(
            "part(s) {}{more} missing: every part of the batch is needed",
            missing.join(", ")
        ));
    }
    // In part order, then interleaved back into the batch's input order.
    let mut ordered: Vec<Part> = Vec::with_capacity(parts.len());
    let mut by_index: Vec<Option<Part>> = parts.into_iter().map(|(_, p)| Some(p)).collect();
    for k in slots.into_values() {
        if let Some(p) = by_index[k].take() {
            ordered.push(p);
        }
    }
    let from_journal: usize = ordered.iter().map(|p| p.summary.from_journal).sum();
    let skipped: Vec<SkippedReport> = ordered
        .iter_mut()
        .flat_map(|p| std::mem::take(&mut p.skipped))
        .collect();
    let mut parameters = None;
    let mut images: Vec<std::vec::IntoIter<ImageReport>> = Vec::new();
    for p in ordered {
        parameters.get_or_insert(p.parameters);
        images.push(p.images.into_iter());
    }
    let mut parameters = parameters.ok_or("no reports to join")?;
    parameters.shard = None;
    let mut batch = Vec::with_capacity(head.batch_images);
    for i in 0..head.batch_images {
        if let Some(report) = images[i % head.count].next() {
            batch.push(BatchImage {
                report,
                interrupted: false,
                from_journal: false,
            });
        }
    }
    let mut report = assemble_from(parameters, batch, skipped, created_utc);
    report.summary.from_journal = from_journal;
    Ok(report)
}

/// The parameters as JSON without the part's own place.
fn comparable(p: &Parameters) -> Result<serde_json::Value, String> {
    let mut v = serde_json::to_value(p).map_err(|e| e.to_string())?;
    if let Some(o) = v.as_object_mut() {
        o.remove("shard");
    }
    Ok(v)
}

/// The first top-level key whose value differs, if any.
fn first_difference(a: &serde_json::Value, b: &serde_json::Value) -> Option<String> {
    let (Some(a), Some(b)) = (a.as_object(), b.as_object()) else {
        return (a != b).then(|| "(all)".into());
    };
    a.keys()
        .chain(b.keys())
        .find(|k| a.get(*k) != b.get(*k))
        .cloned()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_image_falls_to_exactly_one_part() {
        // Counting: images 0..total split by i mod count cover each once,
        // and the parts' sizes are those `images_of_part` gives.
        for total in 0..40 {
            for count in 1..7 {
                let mut sizes = vec![0; count];
                for i in 0..total {
                    let owners: Vec<usize> =
                        (1..=count).filter(|&k| in_part(i, k, count)).collect();
                    assert_eq!(owners.len(), 1);
                    sizes[owners[0] - 1] += 1;
                }
                for k in 1..=count {
                    assert_eq!(sizes[k - 1], images_of_part(total, k, count));
                }
            }
        }
        assert_eq!(images_of_part(10, 0, 3), 0);
        assert_eq!(images_of_part(10, 4, 3), 0);
    }

    #[test]
    fn the_first_difference_is_named() {
        let a = serde_json::json!({"x": 1, "y": [1, 2]});
        let b = serde_json::json!({"x": 1, "y": [1, 3]});
        assert_eq!(first_difference(&a, &b).as_deref(), Some("y"));
        assert_eq!(first_difference(&a, &a), None);
        let c = serde_json::json!({"x": 1, "y": [1, 2], "z": 0});
        assert_eq!(first_difference(&a, &c).as_deref(), Some("z"));
    }
}
