//! Environment variables that steer numerical results, threading or which libraries load.
//!
//! Only variables with a class in the one table of variables ([`crate::envvars`]) are kept
//! (Terraform's own `TF_` variables are not TensorFlow's and are left out); every other
//! variable is left out. A kept variable is recorded by its value's grammar
//! ([`crate::redact::env_value`]): the value when the grammar is known, a digest when it is
//! not, the name only when its name or value holds a credential.

use std::collections::BTreeMap;

use crate::manifest::EnvInfo;
use crate::redact::{env_value, Recorded};

/// Picks the relevant variables out of an environment snapshot. With `private`, values that
/// contain absolute paths are replaced by a short digest so that two runs can still be compared
/// without revealing folder or user names.
pub fn collect(vars: &BTreeMap<String, String>, private: bool) -> EnvInfo {
    let mut info = EnvInfo::default();
    for (name, value) in vars {
        if !crate::envvars::is_recorded(name) {
            continue;
        }
        let value = match env_value(name, value) {
            Recorded::NameOnly => {
                info.redacted.push(name.clone());
                continue;
            }
            Recorded::Digest(d) => d,
            Recorded::Value(v) => v,
        };
        let value = if private && value.contains('/') {
            crate::privacy::digest(&value)
        } else {
            value
        };
        info.vars.insert(name.clone(), value);
    }
    info
}

#[cfg(test)]
mod tests {
    use super::*;

    fn env(pairs: &[(&str, &str)]) -> BTreeMap<String, String> {
        pairs
            .iter()
            .map(|(k, v)| (k.to_string(), v.to_string()))
            .collect()
    }

    #[test]
    fn keeps_relevant_drops_the_rest_and_hides_secrets() {
        let info = collect(
            &env(&[
                ("OMP_NUM_THREADS", "4"),
                ("HOME", "/home/someone"),
                ("CUDA_TOKEN", "abc"),
                ("TF_SERVER", "https://u:p@host.invalid/x"),
                ("CUBLAS_WORKSPACE_CONFIG", ":4096:8"),
            ]),
            false,
        );
        assert_eq!(info.vars.get("OMP_NUM_THREADS").unwrap(), "4");
        assert_eq!(info.vars.get("CUBLAS_WORKSPACE_CONFIG").unwrap(), ":4096:8");
        assert!(!info.vars.contains_key("HOME"));
        assert_eq!(info.redacted, vec!["CUDA_TOKEN", "TF_SERVER"]);
    }

    #[test]
    fn terraform_variables_are_not_tensorflow_settings() {
        // Names from the Terraform CLI environment variables reference.
        let info = collect(
            &env(&[
                ("TF_VAR_db_password", "hunter2"),
                ("TF_VAR_region", "us-west-1"),
                ("TF_CLI_ARGS_plan", "-var=token=abc"),
                ("TF_CLI_CONFIG_FILE", "/home/someone/.terraformrc"),
                ("TF_TOKEN_app_example_invalid", "abc"),
                ("TF_LOG", "trace"),
                // TensorFlow's own (TensorFlow determinism and oneDNN docs).
                ("TF_DETERMINISTIC_OPS", "1"),
                ("TF_ENABLE_ONEDNN_OPTS", "0"),
            ]),
            false,
        );
        let names: Vec<&str> = info.vars.keys().map(String::as_str).collect();
        assert_eq!(names, ["TF_DETERMINISTIC_OPS", "TF_ENABLE_ONEDNN_OPTS"]);
        assert!(info.redacted.is_empty());
    }

    #[test]
    fn values_of_unknown_grammar_are_digests() {
        let info = collect(
            &env(&[("TF_CONFIG", r#"{"task": {"type": "worker"}}"#)]),
            false,
        );
        assert!(info.vars["TF_CONFIG"].starts_with("[sha256:"));
    }

    #[test]
    fn private_hashes_paths() {
        let info = collect(&env(&[("VIRTUAL_ENV", "/home/someone/.venv")]), true);
        let v = info.vars.get("VIRTUAL_ENV").unwrap();
        assert!(v.starts_with("private:sha256:") && !v.contains("someone"));
    }
}
