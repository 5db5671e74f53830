//! The per-observation verdicts of one solution, held compactly: each entry
//! names its sensor by an index into a table of names shared between
//! solutions, so building a list copies no string and dropping one runs no
//! destructor per entry. On the wire the list is exactly a sequence of
//! [`ObsVerdict`] maps (`sensor`, `seq`, `residual`, `inlier`, in that
//! order), byte for byte what a `Vec<ObsVerdict>` serialises to.

use std::sync::Arc;

use serde::{Deserialize, Deserializer, Serialize, Serializer};

use crate::message::{ObsVerdict, SensorName};

/// One verdict with its sensor as an index into [`VerdictList::names`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VerdictEntry {
    /// The observation's sequence number.
    pub seq: u64,
    /// Angle between the propagated `b` and `A r`, radians.
    pub residual: f64,
    /// Index of the sensor's name in the list's name table.
    pub sensor: u32,
    /// Whether the χ² gate passed it.
    pub inlier: bool,
}

/// One verdict of a [`VerdictList`], its sensor name borrowed from the table.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct VerdictRef<'a> {
    /// Sensor id.
    pub sensor: &'a SensorName,
    /// The observation's sequence number.
    pub seq: u64,
    /// Angle between the propagated `b` and `A r`, radians.
    pub residual: f64,
    /// Whether the χ² gate passed it.
    pub inlier: bool,
}

impl VerdictRef<'_> {
    /// The owned wire-shaped verdict.
    pub fn to_owned(&self) -> ObsVerdict {
        ObsVerdict {
            sensor: self.sensor.clone(),
            seq: self.seq,
            residual: self.residual,
            inlier: self.inlier,
        }
    }
}

/// The verdicts of one solution, in window order (see the module doc).
///
/// Two lists are equal when their verdicts are, whatever their name tables.
#[derive(Debug, Clone, Default)]
pub struct VerdictList {
    names: Arc<[SensorName]>,
    entries: Vec<VerdictEntry>,
}

/// Why [`VerdictList::extend_indexed`] refused entries.
#[derive(Debug, Clone, Copy, PartialEq, Eq, thiserror::Error)]
#[error("verdict sensor index {index} is past the name table of {names} names")]
pub struct UnknownSensorIndex {
    /// The index given.
    pub index: u32,
    /// Names in the table.
    pub names: usize,
}

impl VerdictList {
    /// An empty list over the name table `names`, room for `capacity` entries.
    pub fn with_names(names: Arc<[SensorName]>, capacity: usize) -> VerdictList {
        VerdictList {
            names,
            entries: Vec::with_capacity(capacity),
        }
    }

    /// Appends entries whose sensors index [`Self::names`]. Refuses (and
    /// keeps the list as it was) when an index is past the table.
    pub fn extend_indexed(
        &mut self,
        entries: impl IntoIterator<Item = VerdictEntry>,
    ) -> Result<(), UnknownSensorIndex> {
        let start = self.entries.len();
        self.entries.extend(entries);
        let names = self.names.len();
        // One check after the copy: the loop that writes stays branch-free.
        let max = self.entries[start..].iter().map(|e| e.sensor).max();
        match max {
            Some(index) if index as usize >= names => {
                self.entries.truncate(start);
                Err(UnknownSensorIndex { index, names })
            }
            _ => Ok(()),
        }
    }

    /// Appends one verdict, adding its sensor's name to the table if new.
    pub fn push(&mut self, verdict: ObsVerdict) {
        let sensor = match self.names.iter().position(|n| *n == verdict.sensor) {
            Some(i) => i,
            None => {
                let mut names = self.names.to_vec();
                names.push(verdict.sensor);
                self.names = names.into();
                self.names.len() - 1
            }
        };
        self.entries.push(VerdictEntry {
            seq: verdict.seq,
            residual: verdict.residual,
            sensor: sensor as u32,
            inlier: verdict.inlier,
        });
    }

    /// The table of sensor names the entries index.
    pub fn names(&self) -> &Arc<[SensorName]> {
        &self.names
    }

    /// The entries, sensors as indices.
    pub fn entries(&self) -> &[VerdictEntry] {
        &self.entries
    }

    /// Verdicts held.
    pub fn len(&self) -> usize {
        self.entries.len()
    }

    /// Whether no verdict is held.
    pub fn is_empty(&self) -> bool {
        self.entries.is_empty()
    }

    /// Verdict `i`, if there is one.
    pub fn get(&self, i: usize) -> Option<VerdictRef<'_>> {
        self.entries.get(i).map(|e| self.resolve(e))
    }

    /// The verdicts in order.
    pub fn iter(&self) -> VerdictIter<'_> {
        VerdictIter {
            list: self,
            entries: self.entries.iter(),
        }
    }

    /// The verdicts as owned wire-shaped values.
    pub fn to_vec(&self) -> Vec<ObsVerdict> {
        self.iter().map(|v| v.to_owned()).collect()
    }

    fn resolve<'a>(&'a self, e: &VerdictEntry) -> VerdictRef<'a> {
        VerdictRef {
            // Every way in checks the index (`extend_indexed`, `push`).
            sensor: &self.names[e.sensor as usize],
            seq: e.seq,
            residual: e.residual,
            inlier: e.inlier,
        }
    }
}

impl PartialEq for VerdictList {
    fn eq(&self, other: &VerdictList) -> bool {
        self.len() == other.len() && self.iter().eq(other.iter())
    }
}

impl<'a> IntoIterator for &'a VerdictList {
    type Item = VerdictRef<'a>;
    type IntoIter = VerdictIter<'a>;

    fn into_iter(self) -> VerdictIter<'a> {
        self.iter()
    }
}

/// The verdicts of a [`VerdictList`] in order ([`VerdictList::iter`]).
#[derive(Debug, Clone)]
pub struct VerdictIter<'a> {
    list: &'a VerdictList,
    entries: std::slice::Iter<'a, VerdictEntry>,
}

impl<'a> Iterator for VerdictIter<'a> {
    type Item = VerdictRef<'a>;

    fn next(&mut self) -> Option<VerdictRef<'a>> {
        self.entries.next().map(|e| self.list.resolve(e))
    }

    fn size_hint(&self) -> (usize, Option<usize>) {
        self.entries.size_hint()
    }
}

impl ExactSizeIterator for VerdictIter<'_> {}

impl FromIterator<ObsVerdict> for VerdictList {
    fn from_iter<I: IntoIterator<Item = ObsVerdict>>(iter: I) -> VerdictList {
        let mut list = VerdictList::default();
        for v in iter {
            list.push(v);
        }
        list
    }
}

impl From<Vec<ObsVerdict>> for VerdictList {
    fn from(verdicts: Vec<ObsVerdict>) -> VerdictList {
        verdicts.into_iter().collect()
    }
}

/// The wire shape of one entry: the fields of [`ObsVerdict`] in its order.
#[derive(Serialize)]
#[serde(rename = "ObsVerdict")]
struct WireVerdict<'a> {
    sensor: &'a str,
    seq: u64,
    residual: f64,
    inlier: bool,
}

impl Serialize for VerdictList {
    fn serialize<S: Serializer>(&self, serializer: S) -> Result<S::Ok, S::Error> {
        serializer.collect_seq(self.iter().map(|v| WireVerdict {
            sensor: v.sensor.as_str(),
            seq: v.seq,
            residual: v.residual,
            inlier: v.inlier,
        }))
    }
}

impl<'de> Deserialize<'de> for VerdictList {
    fn deserialize<D: Deserializer<'de>>(deserializer: D) -> Result<VerdictList, D::Error> {
        Ok(Vec::<ObsVerdict>::deserialize(deserializer)?.into())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> Vec<ObsVerdict> {
        let v = |sensor: &str, seq, residual, inlier| ObsVerdict {
            sensor: sensor.into(),
            seq,
            residual,
            inlier,
        };
        vec![
            v("st", 7, 1.5e-4, true),
            v("mag", 3, 0.8, false),
            v("st", 8, 2.5e-4, true),
            v(
                "a-sensor-name-longer-than-23-bytes",
                u64::MAX,
                std::f64::consts::PI,
                false,
            ),
        ]
    }

    #[test]
    fn the_list_serialises_to_the_bytes_of_the_plain_vector() {
        let plain = sample();
        let list = VerdictList::from(plain.clone());
        assert_eq!(list.names().len(), 3, "each name once");
        assert_eq!(
            rmp_serde::to_vec_named(&list).unwrap(),
            rmp_serde::to_vec_named(&plain).unwrap()
        );
        assert_eq!(
            serde_json::to_string(&list).unwrap(),
            serde_json::to_string(&plain).unwrap()
        );
        let back: VerdictList =
            rmp_serde::from_slice(&rmp_serde::to_vec_named(&plain).unwrap()).unwrap();
        assert_eq!(back.to_vec(), plain);
        assert_eq!(back, list);
    }

    #[test]
    fn indexed_entries_past_the_table_are_refused_whole() {
        let names: Arc<[SensorName]> = vec![SensorName::from("st"), "sun".into()].into();
        let mut list = VerdictList::with_names(names, 4);
        let e = |sensor, seq| VerdictEntry {
            seq,
            residual: 0.0,
            sensor,
            inlier: true,
        };
        list.extend_indexed([e(1, 0), e(0, 1)]).unwrap();
        let err = list.extend_indexed([e(0, 2), e(2, 3)]).unwrap_err();
        assert_eq!(err, UnknownSensorIndex { index: 2, names: 2 });
        assert_eq!(list.len(), 2, "the refused batch is not kept");
        assert_eq!(list.get(0).unwrap().sensor, "sun");
        assert_eq!(list.get(1).unwrap().seq, 1);
    }

    #[test]
    fn lists_with_different_tables_compare_by_their_verdicts() {
        let plain = sample();
        let a = VerdictList::from(plain.clone());
        let names: Arc<[SensorName]> = vec![
            SensorName::from("mag"),
            "unused".into(),
            "a-sensor-name-longer-than-23-bytes".into(),
            "st".into(),
        ]
        .into();
        let mut b = VerdictList::with_names(names, 4);
        let idx = |s: &str| b.names().iter().position(|n| n == s).unwrap() as u32;
        let entries: Vec<VerdictEntry> = plain
            .iter()
            .map(|v| VerdictEntry {
                seq: v.seq,
                residual: v.residual,
                sensor: idx(&v.sensor),
                inlier: v.inlier,
            })
            .collect();
        b.extend_indexed(entries).unwrap();
        assert_eq!(a, b);
        let mut c = b.clone();
        c.push(ObsVerdict {
            sensor: "st".into(),
            seq: 9,
            residual: 0.0,
            inlier: true,
        });
        assert_ne!(a, c);
    }
}
