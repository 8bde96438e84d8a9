//! The files read with a lockfile, one way for every place lockfiles are read from: the work
//! tree ([`super::lockfiles`]) and a git revision's tree ([`super::at_rev`]). Each place says
//! how to find and read a file ([`IncludeSource`]); what is read and how is decided here: the
//! companion file of a format (`go.sum` beside `go.mod`) and the files a requirements file
//! includes (`-r FILE`, `-c FILE`; pip's "Requirements File Format"), in order, each once,
//! URLs never fetched, constraints recorded as optional.

use std::collections::HashSet;
use std::hash::Hash;

use crate::lockfile::{requirements, Include, Parsed};

/// Where included files are found and read.
pub(crate) trait IncludeSource {
    /// The identity of a file, so that each is read once (and include cycles end).
    type Key: Clone + Eq + Hash;

    /// The file `target` names, relative to the folder of `from`; `Err` is the rest of a
    /// warning that starts "lockfile `FROM`: ".
    fn locate(&mut self, from: &Self::Key, target: &str) -> Result<Self::Key, String>;

    /// The text of file `key`, read for `from` (decoded as lockfiles are,
    /// [`crate::lockfile::decode`]); `Err` says why not, as the end of a sentence.
    fn load(&mut self, from: &Self::Key, key: &Self::Key) -> Result<String, String>;

    /// How the file is named in messages and errors.
    fn shown(&self, key: &Self::Key) -> String;

    /// The file `name` in the folder of `of`, when there is one.
    fn beside(&mut self, of: &Self::Key, name: &str) -> Option<Self::Key>;
}

/// The companion of a lockfile of `format` (see [`crate::lockfile::Format::companion`]):
/// `(text, shown path)` when it exists and reads; a warning when it exists and does not.
pub(crate) fn companion<S: IncludeSource>(
    source: &mut S,
    file: &S::Key,
    format: crate::lockfile::Format,
    warnings: &mut Vec<String>,
) -> Option<(String, String)> {
    let name = format.companion()?;
    let key = source.beside(file, name)?;
    let shown = source.shown(&key);
    match source.load(file, &key) {
        Ok(text) => Some((text, shown)),
        Err(why) => {
            warnings.push(format!("lockfile `{shown}`: {why}"));
            None
        }
    }
}

/// Reads the files `parsed` includes, and theirs, each at most once, and adds their packages
/// to `parsed`; entries from constraints files (`-c`) are recorded as optional, since they pin
/// versions without asking for installation. A URL is never fetched.
pub(crate) fn merge<S: IncludeSource>(
    source: &mut S,
    file: S::Key,
    parsed: &mut Parsed,
    warnings: &mut Vec<String>,
) {
    let mut seen: HashSet<S::Key> = HashSet::from([file.clone()]);
    let mut queue: Vec<(S::Key, Include)> = parsed
        .includes
        .drain(..)
        .map(|inc| (file.clone(), inc))
        .collect();
    while let Some((from, inc)) = queue.pop() {
        let from_shown = source.shown(&from);
        if inc.target.contains("://") {
            warnings.push(format!(
                "lockfile `{from_shown}`: included `{}` is a URL and was not read",
                crate::redact::scrub_url_credentials(&inc.target)
            ));
            continue;
        }
        let loaded = source.locate(&from, &inc.target).and_then(|key| {
            if seen.contains(&key) {
                return Ok(None);
            }
            let text = source
                .load(&from, &key)
                .map_err(|why| format!("cannot read included {}: {why}", quoted(&inc.target)))?;
            Ok(Some((key, text)))
        });
        let (key, text) = match loaded {
            Ok(Some(v)) => v,
            Ok(None) => continue,
            Err(why) => {
                warnings.push(format!("lockfile `{from_shown}`: {why}"));
                continue;
            }
        };
        seen.insert(key.clone());
        match requirements::parse(&text, &source.shown(&key)) {
            Ok(mut sub) => {
                warnings.append(&mut sub.warnings);
                for mut p in sub.packages {
                    p.optional |= inc.constraints_only;
                    parsed.packages.push(p);
                }
                queue.extend(sub.includes.into_iter().map(|i| {
                    let constraints_only = i.constraints_only || inc.constraints_only;
                    (
                        key.clone(),
                        Include {
                            constraints_only,
                            ..i
                        },
                    )
                }));
            }
            Err(e) => warnings.push(format!("lockfile {e}")),
        }
    }
    crate::lockfile::python::sort_packages(&mut parsed.packages);
}

/// The text of an include target for messages: content-free (a target is not shown when it
/// could hold a credential).
pub(crate) fn quoted(target: &str) -> String {
    crate::redact::content_free(&format!("`{target}`"))
}
