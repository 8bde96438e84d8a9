"""Secret samples generated from public secret-pattern collections, for tests/secrets.rs.

Sources (installed by .ci/run from PyPI, pinned):
  * detect-secrets 1.5.0: the `denylist` regular expressions of every detector plugin
    (detect_secrets/plugins/*.py), except IPPublicDetector (an address is not a secret);
  * trufflehog3 3.0.10: every `pattern` rule of trufflehog3/static/rules.yml, except those
    that match a plain hexadecimal value or a UUID only by a vendor's name near it
    (`facebook.oauth-token`, `heroku.api-key`: runprint keeps bare hexadecimal values and
    UUIDs by design, as digests and device ids, and the drawn samples garble the name) and
    the marker of a service-account file (`google.gcp-service-account`, not a value);
  * whispers 2.4.0: the `value` regular expressions of whispers/rules/keys.yml
    (`apikey-known` lists the known token prefixes as one alternation), except the rules
    that match any value under a suspicious key name (`apikey`, `apikey-maybe`) and AWS
    account numbers (`aws-account`, twelve digits, an identifier rather than a secret).

Each regular expression is turned into random matching strings with rstr.xeger (seeded, so
every run gives the same samples). Prints one JSON object per line:
{"source": ..., "rule": ..., "sample": ...}.
"""

import importlib
import json
import os
import pkgutil
import random
import re
import sys

import rstr
import yaml

TRUFFLEHOG3_LEFT_OUT = ("facebook.oauth-token", "heroku.api-key", "google.gcp-service-account")
SAMPLES_PER_RULE = 3
# The alternation of known prefixes gets more samples so that most branches are drawn.
SAMPLES_PER_ALTERNATION = 120


def detect_secrets_rules():
    import detect_secrets.plugins as plugins

    for info in pkgutil.iter_modules(plugins.__path__):
        module = importlib.import_module("detect_secrets.plugins." + info.name)
        for name, obj in vars(module).items():
            denylist = getattr(obj, "denylist", None)
            if not name[0].isupper() or not isinstance(denylist, (list, tuple)):
                continue
            if name == "IPPublicDetector":
                continue
            for i, regex in enumerate(denylist):
                yield "detect-secrets 1.5.0", f"{name}[{i}]", regex.pattern, regex.flags


def trufflehog3_rules():
    import trufflehog3

    path = os.path.join(os.path.dirname(trufflehog3.__file__), "static", "rules.yml")
    with open(path) as f:
        for rule in yaml.safe_load(f):
            if rule["id"] in TRUFFLEHOG3_LEFT_OUT:
                continue
            if "pattern" in rule:
                yield "trufflehog3 3.0.10", rule["id"], rule["pattern"], 0


def whispers_rules():
    import whispers

    path = os.path.join(os.path.dirname(whispers.__file__), "rules", "keys.yml")
    with open(path) as f:
        for rule in yaml.safe_load(f):
            value = rule.get("value") or {}
            if rule["id"] in ("apikey", "apikey-maybe", "aws-account"):
                continue
            if "regex" in value:
                flags = re.IGNORECASE if value.get("ignorecase") else 0
                yield "whispers 2.4.0", rule["id"], value["regex"], flags


def strip_lookarounds(pattern):
    # rstr cannot draw lookarounds; the samples it draws without them still match the rest.
    return re.sub(r"\(\?<?[!=][^()]*(\([^()]*\)[^()]*)*\)", "", pattern)


def main():
    random.seed(1)
    rstr_gen = rstr.Rstr(random.Random(7))
    seen = set()
    for source, rule, pattern, flags in [
        *detect_secrets_rules(),
        *trufflehog3_rules(),
        *whispers_rules(),
    ]:
        inline = re.match(r"^\(\?[a-zA-Z]+\)", pattern)
        if inline:
            flags |= re.IGNORECASE if "i" in inline.group(0) else 0
            pattern = pattern[inline.end():]
        drawable = strip_lookarounds(pattern).replace("(?-i)", "")
        count = SAMPLES_PER_ALTERNATION if rule == "apikey-known" else SAMPLES_PER_RULE
        for _ in range(count):
            try:
                sample = rstr_gen.xeger(drawable)
            except Exception as e:  # a construct rstr cannot draw
                print(f"cannot draw {source} {rule}: {e}", file=sys.stderr)
                break
            # Keep samples that the original expression really matches, on one line.
            if "\n" in sample or "\r" in sample or not re.search(pattern, sample, flags):
                continue
            if sample in seen:
                continue
            seen.add(sample)
            print(json.dumps({"source": source, "rule": rule, "sample": sample}))


if __name__ == "__main__":
    main()
