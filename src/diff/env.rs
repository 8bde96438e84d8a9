//! The `env` section: recorded environment variables, by the class of the one table of
//! variables (`crate::envvars`), `XLA_FLAGS` flag by flag.

use super::*;

pub(super) fn compare_env(old: &Content, new: &Content, ctx: &Context<'_>, out: &mut Vec<Change>) {
    use crate::classes::EnvClass;
    let (o, n) = (&old.env.vars, &new.env.vars);
    let python_compared = !old.python.is_empty() && !new.python.is_empty();
    for (name, a, b) in outer_join(o, n) {
        if a == b {
            continue;
        }
        let class = rules::env_class(name, ctx.policy);
        // Python docs: PYTHONHASHSEED "random" is the same as leaving it unset.
        if class == Some(EnvClass::HashSeed) {
            let norm = |v: Option<&String>| v.filter(|v| v.as_str() != "random").cloned();
            if norm(a) == norm(b) {
                continue;
            }
        }
        let what = match (a, b) {
            (None, _) => "was set",
            (_, None) => "was unset",
            _ => "changed",
        };
        let mut lead = format!("{name} {what}");
        let rule = match class {
            Some(EnvClass::Flags) => {
                let (fa, fb): (BTreeSet<&str>, BTreeSet<&str>) = (
                    a.map(|v| crate::envvars::xla_flags(v))
                        .unwrap_or_default()
                        .into_iter()
                        .collect(),
                    b.map(|v| crate::envvars::xla_flags(v))
                        .unwrap_or_default()
                        .into_iter()
                        .collect(),
                );
                let changed: Vec<&str> = fa.symmetric_difference(&fb).copied().collect();
                let top = changed
                    .iter()
                    .map(|f| rules::env_class_rule(crate::envvars::xla_flag_class(f)))
                    .max_by_key(|r| (r.impact, r.weight))
                    .unwrap_or(&rules::ENV_LOGGING);
                lead = format!("{lead} (flags added or removed: {})", changed.join(" "));
                top
            }
            // Without a recorded interpreter on both sides, another environment folder is the
            // only sign that other packages may load.
            Some(EnvClass::Location)
                if !python_compared
                    && matches!(
                        name.as_str(),
                        "VIRTUAL_ENV" | "CONDA_PREFIX" | "CONDA_DEFAULT_ENV"
                    ) =>
            {
                lead = format!("{lead}, and no Python environment was recorded on both sides to compare its packages");
                &rules::ENV_LOADER
            }
            Some(c) => rules::env_class_rule(c),
            None => &rules::ENV_NOT_NUMERIC,
        };
        out.push(Change::from_rule(
            rule,
            Section::Env,
            format!("env {name}"),
            lead,
            a.cloned(),
            b.cloned(),
        ));
    }
    let (ro, rn): (BTreeSet<_>, BTreeSet<_>) = (
        old.env.redacted.iter().collect(),
        new.env.redacted.iter().collect(),
    );
    for name in ro.symmetric_difference(&rn) {
        out.push(Change::from_rule(
            &rules::ENV_CREDENTIAL,
            Section::Env,
            format!("env {name}"),
            "",
            None,
            None,
        ));
    }
}
