"""The mapping file of ``sprig pack --map`` (docs/mapping.md), read the way the converter reads it.

A mapping is a dict (or a JSON file holding one) from their tensor names, or patterns with
``{placeholders}``, to ours. Values: ``"our.name"`` (rename), ``{"to": ..., "transpose": bool}``,
``{"stack": ..., "over": "e", "transpose": bool}``, ``{"split": [...] or {...}, "axis": int,
"transpose": bool}``. A placeholder matches a decimal integer without leading zeros.

`Mapping.apply` turns their arrays into ours (what `sprig pack` does before matching);
`Mapping.invert` turns ours into theirs (unstack, concatenate, transpose back), so that
``apply(invert(ours)) == ours``. Errors are ValueError, one sentence naming the mapping (its
path, or "the mapping" for a dict), the entry and the tensors, as the converter's do.
"""

import json
import re

import numpy as np

# As the converter's limit (converter/config/mapping.cc).
_MAX_PLACEHOLDERS = 16
_PLACEHOLDER_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_]*\Z")
_DIGITS = "0123456789"
_FIELDS = {"to": ("to", "transpose"), "stack": ("stack", "over", "transpose"),
           "split": ("split", "axis", "transpose")}


def _q(text):
    return json.dumps(text)


def _parse_pattern(text, where):
    """[(is_placeholder, text)]: "h.{i}.w" -> [(False, "h."), (True, "i"), (False, ".w")]."""
    tokens, literal, i = [], "", 0
    while i < len(text):
        c = text[i]
        if c == "}":
            raise ValueError(f'{where}: {_q(text)} has a "}}" without its "{{"; a placeholder is '
                             "written {name}, with letters, digits and underscores")
        if c != "{":
            literal += c
            i += 1
            continue
        close = text.find("}", i)
        name = text[i + 1:close] if close >= 0 else ""
        if not _PLACEHOLDER_NAME.match(name):
            raise ValueError(f"{where}: {_q(text)} has a malformed placeholder; a placeholder is "
                             "written {name}, with letters, digits and underscores")
        if any(p and t == name for p, t in tokens):
            raise ValueError(f"{where}: {_q(text)} uses {{{name}}} twice; give each placeholder "
                             "its own name")
        if literal:
            tokens.append((False, literal))
            literal = ""
        if tokens and tokens[-1][0]:
            raise ValueError(f"{where}: {_q(text)} has two placeholders with nothing between them")
        tokens.append((True, name))
        if len(_placeholders(tokens)) > _MAX_PLACEHOLDERS:
            raise ValueError(f"{where}: {_q(text)} has more than {_MAX_PLACEHOLDERS} placeholders")
        i = close + 1
    if literal:
        tokens.append((False, literal))
    return tokens


def _placeholders(tokens):
    return [t for p, t in tokens if p]


class _Matcher:
    """Matches names against a pattern as the converter does (converter/config/mapping.cc):
    each placeholder takes a decimal integer without leading zeros, longest first, and a
    (token, position) that failed once is not tried again, so no key costs exponential time (a
    regular expression would backtrack through every way to divide a run of digits)."""

    def __init__(self, tokens):
        self.tokens = tokens

    def fullmatch(self, name):
        failed, values = set(), {}

        def match(t, pos):
            if t == len(self.tokens):
                return pos == len(name)
            if (t, pos) in failed:
                return False
            placeholder, text = self.tokens[t]
            if not placeholder:
                if name.startswith(text, pos) and match(t + 1, pos + len(text)):
                    return True
            else:
                end = pos
                while end < len(name) and name[end] in _DIGITS:
                    end += 1
                if end > pos and name[pos] == "0":
                    end = pos + 1  # "0" alone; "07" is not a number here
                for stop in range(end, pos, -1):
                    values[text] = name[pos:stop]
                    if match(t + 1, stop):
                        return True
                values.pop(text, None)
            failed.add((t, pos))
            return False

        return dict(values) if match(0, 0) else None


def _substitute(tokens, values):
    return "".join(values[t] if p else t for p, t in tokens)


def _swap(a):
    return np.ascontiguousarray(np.swapaxes(a, -1, -2))


class _Entry:
    """One entry: its key pattern and what becomes of the tensors it matches."""

    def __init__(self, source, key, value):
        self.key = key
        self.where = f"{source}: entry {_q(key)}"
        if not key:
            raise ValueError(f"{source}: an entry has an empty name")
        self.kind, self.transpose, self.axis, self.over = "to", False, 0, None
        self.parts, self.equal = [], False  # split: [(name, begin, end)] along the axis
        if isinstance(value, str):
            self.to = self._name(value, "to")
        elif isinstance(value, dict):
            forms = [f for f in ("to", "stack", "split") if f in value]
            if len(forms) != 1:
                raise ValueError(f'{self.where}: an entry object needs exactly one of "to", '
                                 f'"stack" or "split", got {json.dumps(value)}')
            self.kind = forms[0]
            for field in value:
                if field not in _FIELDS[self.kind]:
                    raise ValueError(f"{self.where}: unknown field {_q(field)} (expected "
                                     f"{', '.join(_FIELDS[self.kind])})")
            if self.kind == "to":
                self.to = self._name(value["to"], "to")
            elif self.kind == "stack":
                self.to = self._name(value["stack"], "stack")
                if "over" not in value:
                    raise ValueError(f'{self.where}: a stack needs "over", the placeholder that '
                                     "numbers the parts")
                self.over = self._name(value["over"], "over")
            else:
                self._parse_split(value["split"])
                axis = value.get("axis", 0)
                if not isinstance(axis, int) or isinstance(axis, bool):
                    raise ValueError(f'{self.where}: "axis" must be an integer, got '
                                     f"{json.dumps(axis)}")
                self.axis = axis
            transpose = value.get("transpose", False)
            if not isinstance(transpose, bool):
                raise ValueError(f'{self.where}: "transpose" must be true or false, got '
                                 f"{json.dumps(transpose)}")
            self.transpose = transpose
        else:
            raise ValueError(f'{self.where}: the value must be our name or an object with "to", '
                             f'"stack" or "split", got {json.dumps(value)}')
        self._check_placeholders()

    def _name(self, value, field):
        if not isinstance(value, str) or not value:
            raise ValueError(f'{self.where}: "{field}" must be a non-empty string, got '
                             f"{json.dumps(value)}")
        return value

    def _parse_split(self, split):
        if isinstance(split, list):
            self.equal = True
            self.parts = [(self._name(name, "split"), 0, 0) for name in split]
        elif isinstance(split, dict):
            for name, r in split.items():
                ok = (isinstance(r, list) and len(r) == 2 and
                      all(isinstance(v, int) and not isinstance(v, bool) for v in r) and
                      0 <= r[0] < r[1])
                if not name or not ok:
                    raise ValueError(f"{self.where}: part {_q(name)} must be a non-empty name "
                                     "with a range [begin, end) of integers, 0 <= begin < end, "
                                     f"got {json.dumps(r)}")
                self.parts.append((name, r[0], r[1]))
            self.parts.sort(key=lambda p: p[1])
            covered = 0
            for i, (name, begin, end) in enumerate(self.parts):
                if begin < covered:
                    before = self.parts[i - 1]
                    raise ValueError(f"{self.where}: parts {_q(before[0])} [{before[1]}, "
                                     f"{before[2]}) and {_q(name)} [{begin}, {end}) overlap")
                if begin > covered:
                    raise ValueError(f"{self.where}: no part covers [{covered}, {begin}) before "
                                     f"{_q(name)} [{begin}, {end}); the parts must cover the "
                                     "axis from 0 without gaps")
                covered = end
        else:
            raise ValueError(f'{self.where}: "split" must be a list of names (equal parts) or an '
                             f"object of names to ranges [begin, end), got {json.dumps(split)}")
        if not self.parts:
            raise ValueError(f'{self.where}: "split" names no part')
        names = [p[0] for p in self.parts]
        for name in names:
            if names.count(name) > 1:
                raise ValueError(f"{self.where}: part {_q(name)} is named twice")

    def _check_placeholders(self):
        self.key_tokens = _parse_pattern(self.key, self.where)
        key_names = _placeholders(self.key_tokens)
        if self.kind == "stack" and self.over not in key_names:
            raise ValueError(f'{self.where}: "over" is {_q(self.over)}, but the key has no '
                             f"{{{self.over}}} placeholder to number the parts by")
        self.values = [p[0] for p in self.parts] if self.kind == "split" else [self.to]
        self.value_tokens = []
        for v in self.values:
            tokens = _parse_pattern(v, self.where)
            used = _placeholders(tokens)
            for name in used:
                if name not in key_names:
                    raise ValueError(f"{self.where}: {_q(v)} uses {{{name}}}, which the key does "
                                     "not have")
                if self.kind == "stack" and name == self.over:
                    raise ValueError(f"{self.where}: {_q(v)} uses {{{name}}}, the placeholder "
                                     "the stack numbers its parts by")
            for name in key_names:
                if not (self.kind == "stack" and name == self.over) and name not in used:
                    raise ValueError(f"{self.where}: {_q(v)} does not use the key's {{{name}}}, "
                                     "so every tensor it matches would get that one name")
            self.value_tokens.append(tokens)
        self.key_matcher = _Matcher(self.key_tokens)
        self.value_matchers = [_Matcher(t) for t in self.value_tokens]

    def error(self, detail):
        return ValueError(f"{self.where}: {detail}")

    def _transposable(self, name, a):
        if a.ndim < 2:
            raise self.error(f"cannot transpose {name}, which has shape {list(a.shape)}; only "
                             "tensors of two or more axes can be transposed")

    def split(self, name, a):
        """[(our name pattern index, array, origin)] of the parts of `a`."""
        if not -a.ndim <= self.axis < a.ndim:
            raise self.error(f"axis {self.axis} is out of range for {name} with shape "
                             f"{list(a.shape)} ({a.ndim} {'axis' if a.ndim == 1 else 'axes'})")
        axis = self.axis % a.ndim
        dim = a.shape[axis]
        parts = self.parts
        if self.equal:
            n = len(parts)
            if dim % n:
                raise self.error(f"cannot split {name} with shape {list(a.shape)} into {n} equal "
                                 f"parts along axis {axis}: {dim} is not divisible by {n}")
            parts = [(p[0], i * dim // n, (i + 1) * dim // n) for i, p in enumerate(parts)]
        else:
            last, begin, end = parts[-1]
            if end > dim:
                raise self.error(f"part {_q(last)} [{begin}, {end}) runs past the end of {name}, "
                                 f"whose axis {axis} has size {dim} (shape {list(a.shape)})")
            if end < dim:
                raise self.error(f"the parts cover [0, {end}) of axis {axis} of {name} with shape "
                                 f"{list(a.shape)}, leaving [{end}, {dim}) over")
        if self.transpose:
            self._transposable(name, a)
        out = []
        for i, (_, begin, end) in enumerate(parts):
            part = np.take(a, np.arange(begin, end), axis=axis)
            out.append((i, _swap(part) if self.transpose else part,
                        f"split from {name}, [{begin}, {end}) of axis {axis}" +
                        (", transposed" if self.transpose else "")))
        return out


class Mapping:
    """A parsed mapping file; `source` names it in errors."""

    def __init__(self, mapping, source="the mapping"):
        if not isinstance(mapping, dict):
            raise ValueError(f"{source}: a mapping file must be a JSON object of their tensor "
                             f"names (or patterns) to ours, got {json.dumps(mapping)[:40]}")
        self.source = source
        self.entries = [_Entry(source, key, value) for key, value in mapping.items()]
        producer = {}
        for e in self.entries:
            for name in e.values:
                if "{" in name:
                    continue  # compared once the tensors are known
                if name in producer:
                    raise ValueError(f"{source}: entries {_q(producer[name])} and {_q(e.key)} "
                                     f"both produce {_q(name)}")
                producer[name] = e.key

    def _claim(self, name, matchers):
        """(entry, values) of the one entry whose pattern matches `name`, or None."""
        found = []
        for e in self.entries:
            for r in matchers(e):
                values = r.fullmatch(name)
                if values is not None:
                    found.append((e, values))
                    break
        if len(found) > 1:
            raise ValueError(f"{self.source}: {name} matches both entry {_q(found[0][0].key)} and "
                             f"entry {_q(found[1][0].key)}; each tensor may be claimed by one "
                             "entry only")
        return found[0] if found else None

    def apply(self, arrays):
        """Their arrays (a dict, in file order) -> {our name: (array, origin)}; origin is None for
        a tensor no entry matched. Raises ValueError as the converter refuses."""
        outputs = []  # (our name, array, origin, entry or None, their name)
        stacks = {}   # (entry key, our name) -> [pattern, position, {index: (their name, array)}]
        for name, a in arrays.items():
            claim = self._claim(name, lambda e: [e.key_matcher])
            if claim is None:
                outputs.append((name, a, None, None, name))
                continue
            e, values = claim
            if e.kind == "to":
                ours = _substitute(e.value_tokens[0], values)
                if e.transpose:
                    e._transposable(name, a)
                    outputs.append((ours, _swap(a), f"transposed from {name}", e, name))
                else:
                    outputs.append((ours, a, f"renamed from {name}", e, name))
            elif e.kind == "split":
                for i, part, origin in e.split(name, a):
                    outputs.append((_substitute(e.value_tokens[i], values), part, origin, e, name))
            else:
                ours = _substitute(e.value_tokens[0], values)
                group = stacks.get((e.key, ours))
                if group is None:
                    pattern = _substitute(e.key_tokens, dict(values, **{e.over: f"{{{e.over}}}"}))
                    group = stacks[(e.key, ours)] = [pattern, len(outputs), {}]
                    outputs.append(None)
                group[2][values[e.over]] = (name, a)
        for (key, ours), (pattern, position, parts) in stacks.items():
            e = next(x for x in self.entries if x.key == key)
            order = sorted(parts, key=int)
            for i, index in enumerate(order):
                if index != str(i):
                    found = [parts[j][0] for j in order]
                    shown = ", ".join(found[:6]) + (f" and {len(found) - 6} more"
                                                    if len(found) > 6 else "")
                    raise e.error(f"index {i} of {{{e.over}}} is missing for {ours} (stacked from "
                                  f"{pattern}); the indices must run from 0 without gaps, found "
                                  f"{shown}")
            first_name, first = parts[order[0]]
            for index in order:
                n, a = parts[index]
                if a.shape != first.shape or a.dtype != first.dtype:
                    raise e.error(f"cannot stack {first_name} ({list(first.shape)} {first.dtype}) "
                                  f"with {n} ({list(a.shape)} {a.dtype}) into {ours}; the parts "
                                  "must have one shape and element type")
            if e.transpose:
                e._transposable(first_name, first)
            stacked = np.stack([_swap(parts[i][1]) if e.transpose else parts[i][1]
                                for i in order])
            outputs[position] = (ours, stacked, f"stacked from {pattern}" +
                                 (", transposed" if e.transpose else ""), e, pattern)
        result, made_by = {}, {}
        for ours, a, origin, e, theirs in outputs:
            if e is not None:
                if ours in made_by:
                    other_e, other_from = made_by[ours]
                    who = (f"entry {_q(e.key)} gives" if other_e is e else
                           f"entries {_q(other_e.key)} and {_q(e.key)} both give")
                    raise ValueError(f"{self.source}: {who} {ours} (from {other_from} and "
                                     f"{theirs}); each of our names may be produced once")
                made_by[ours] = (e, theirs)
            if ours in result:
                raise ValueError(f"both {ours}{_origin(result[ours][1])} and {ours}"
                                 f"{_origin(origin)} would be tensor {ours}; check the mapping "
                                 "file")
            result[ours] = (a, origin)
        return result

    def invert(self, arrays):
        """Our arrays (a dict) -> theirs: each entry undone (unstacked, concatenated, transposed
        back); names no entry produces pass through."""
        # An entry naming one of our tensors literally must find it: the mapping was written
        # for this model, and a name it lacks is a mistake (in the pack direction an entry
        # matching nothing is ignored, so one mapping may serve files that differ).
        for e in self.entries:
            for name in e.values:
                if "{" not in name and name not in arrays:
                    raise e.error(f"{name} is not a tensor of this model")
        out = {}
        done = set()

        def put(name, a):
            if name in out:
                raise ValueError(f"{self.source}: two of our tensors would be written as {name}")
            out[name] = a

        for ours, a in arrays.items():
            if ours in done:
                continue
            claim = self._claim(ours, lambda e: e.value_matchers)
            if claim is None:
                put(ours, a)
                continue
            e, values = claim
            if e.kind == "to":
                if e.transpose:
                    e._transposable(ours, a)
                put(_substitute(e.key_tokens, values), _swap(a) if e.transpose else a)
                done.add(ours)
            elif e.kind == "stack":
                if a.ndim < (3 if e.transpose else 1):
                    raise e.error(f"cannot unstack {ours} with shape {list(a.shape)}")
                for i in range(a.shape[0]):
                    theirs = _substitute(e.key_tokens, dict(values, **{e.over: str(i)}))
                    put(theirs, _swap(a[i]) if e.transpose else np.ascontiguousarray(a[i]))
                done.add(ours)
            else:
                names = [_substitute(t, values) for t in e.value_tokens]
                missing = [n for n in names if n not in arrays]
                if missing:
                    raise e.error(f"cannot join {', '.join(names)}: {', '.join(missing)} missing")
                parts = [arrays[n] for n in names]
                if e.transpose:
                    parts = [_swap(p) for p in parts]
                put(_substitute(e.key_tokens, values), np.concatenate(parts, axis=e.axis))
                done.update(names)
        return out


def _origin(origin):
    return f" ({origin})" if origin else ""


def _no_duplicate_keys(pairs):
    keys = [k for k, _ in pairs]
    for k in keys:
        if keys.count(k) > 1:
            raise ValueError(f"field {_q(k)} appears twice in the same object")
    return dict(pairs)


def read_mapping(mapping):
    """A Mapping from a dict, a path to a JSON file, or a Mapping (returned as it is); None gives
    an empty mapping."""
    if mapping is None:
        return Mapping({})
    if isinstance(mapping, Mapping):
        return mapping
    if isinstance(mapping, dict):
        return Mapping(mapping)
    path = str(mapping)
    try:
        with open(path, encoding="utf-8") as f:
            data = json.load(f, object_pairs_hook=_no_duplicate_keys)
    except json.JSONDecodeError as e:
        raise ValueError(f"{path}: invalid JSON at line {e.lineno}, column {e.colno}: "
                         f"{e.msg}") from None
    except ValueError as e:
        raise ValueError(f"{path}: {e}") from None
    return Mapping(data, path)
