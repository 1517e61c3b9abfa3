"""Every relative link in the project's Markdown documents resolves.

Checked documents: README.md, DEVELOPERS.md, docs/*.md, schema/README.md and
converter/python/README.md. A link is `[text](target)`, `![alt](target)` or a reference
definition `[label]: target`, outside code blocks and code spans; links with a scheme
(`https:`, `mailto:`) are not followed. A relative target must name an existing file or folder,
and a `#anchor` (alone, for the same document, or after a `.md` file) must match one of that
document's headings.

Anchors follow GitHub's rule for heading ids as commonly described (written from memory, not
from a specification): the heading's text without its Markdown markup, lower-cased, every
character that is not a letter, digit, underscore, hyphen or space removed, each space turned
into a hyphen; a repeated heading gets `-1`, `-2`, ... appended.

Run from the repository root:

    /usr/bin/python3 -m unittest discover -s tests/python -p 'test_doc_links.py'
"""

import glob
import os
import re
import tempfile
import unittest

ROOT = os.path.normpath(os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))

# Relative to the repository root; documents() adds docs/*.md.
FIXED_DOCUMENTS = ["README.md", "DEVELOPERS.md", "schema/README.md", "converter/python/README.md"]

_FENCE = re.compile(r"^ {0,3}(`{3,}|~{3,})")
_ATX_HEADING = re.compile(r"^ {0,3}(#{1,6})[ \t]+(.*?)(?:[ \t]+#+)?[ \t]*$")
_SETEXT_UNDERLINE = re.compile(r"^ {0,3}(=+|-+)[ \t]*$")
# `[text](target "title")` and images; the text may run over lines, the target may be <...>.
_INLINE_LINK = re.compile(r"!?\[([^\]]*)\]\(\s*(<[^>]*>|[^)\s]*)(?:\s+\"[^\"]*\")?\s*\)")
_REFERENCE_DEFINITION = re.compile(r"^ {0,3}\[[^\]]+\]:[ \t]*(<[^>]*>|\S+)", re.MULTILINE)
# A code span may run over lines but not over a blank line (the end of a paragraph).
_CODE_SPAN = re.compile(r"(`+)((?:(?!\n[ \t]*\n).)+?)(?<!`)\1(?!`)", re.DOTALL)
_HTML_COMMENT = re.compile(r"<!--.*?-->", re.DOTALL)
_SCHEME = re.compile(r"^[A-Za-z][A-Za-z0-9+.-]*:")


def _blank(match):
    """The match with every character but newlines replaced by a space, so offsets and line
    numbers stay where they were."""
    return re.sub(r"[^\n]", " ", match.group(0))


def _in_fenced_code(lines):
    """Per line, whether it belongs to a fenced code block (its fences included)."""
    inside = []
    fence = None  # the opening fence: its character repeated as often as it was
    for line in lines:
        m = _FENCE.match(line)
        if fence is None:
            if m:
                fence = m.group(1)
            inside.append(fence is not None)
            continue
        inside.append(True)
        closing = line.strip()
        if closing.startswith(fence) and closing.strip(fence[0]) == "":
            fence = None
    return inside


def _without_code(text):
    """`text` with fenced code blocks, code spans and HTML comments blanked out."""
    lines = text.split("\n")
    lines = ["" if code else line for line, code in zip(lines, _in_fenced_code(lines))]
    text = "\n".join(lines)
    text = _HTML_COMMENT.sub(_blank, text)
    return _CODE_SPAN.sub(_blank, text)


def slug(heading):
    """The anchor GitHub gives a heading whose Markdown source is `heading` (see the module
    comment for the rule)."""
    text = re.sub(r"!?\[([^\]]*)\]\([^)]*\)", r"\1", heading)  # a link counts as its text
    text = text.strip().lower()
    text = re.sub(r"[^\w\- ]", "", text)
    return text.replace(" ", "-")


def headings(text):
    """The source text of every heading in `text` (ATX and setext), outside fenced code."""
    found = []
    lines = text.split("\n")
    previous = ""
    for line, code in zip(lines, _in_fenced_code(lines)):
        if code:
            previous = ""
            continue
        atx = _ATX_HEADING.match(line)
        if atx:
            found.append(atx.group(2))
            previous = ""
            continue
        if previous.strip() and "|" not in previous and _SETEXT_UNDERLINE.match(line):
            found.append(previous.strip())
            previous = ""
            continue
        previous = line
    return found


def anchors(text):
    """Every anchor GitHub makes for the headings of `text`, repeated headings numbered."""
    seen = {}
    result = set()
    for heading in headings(text):
        base = slug(heading)
        count = seen.get(base, 0)
        seen[base] = count + 1
        result.add(base if count == 0 else "%s-%d" % (base, count))
    return result


def links(text):
    """(line number, target) of every link in `text` outside code."""
    clean = _without_code(text)
    found = []
    for m in _INLINE_LINK.finditer(clean):
        found.append((clean.count("\n", 0, m.start()) + 1, m.group(2)))
    for m in _REFERENCE_DEFINITION.finditer(clean):
        found.append((clean.count("\n", 0, m.start()) + 1, m.group(1)))
    return sorted((line, target.strip("<>")) for line, target in found)


def broken_links(path, root):
    """One message per relative link of the Markdown file `path` that does not resolve."""
    with open(path, encoding="utf-8") as f:
        text = f.read()
    where = os.path.relpath(path, root)
    problems = []
    for line, target in links(text):
        if not target or _SCHEME.match(target):
            continue
        file_part, _, anchor = target.partition("#")
        destination = os.path.normpath(os.path.join(os.path.dirname(path), file_part)) \
            if file_part else path
        if not os.path.exists(destination):
            problems.append("%s:%d: %s: no such file or folder" % (where, line, target))
            continue
        if not anchor or not destination.endswith(".md"):
            continue
        with open(destination, encoding="utf-8") as f:
            if anchor not in anchors(f.read()):
                problems.append("%s:%d: %s: no heading with the anchor '%s' in %s" %
                                (where, line, target, anchor, os.path.relpath(destination, root)))
    return problems


def documents(root):
    """The checked documents, relative to `root`."""
    docs = sorted(os.path.relpath(p, root) for p in glob.glob(os.path.join(root, "docs", "*.md")))
    return FIXED_DOCUMENTS + docs


class DocumentLinks(unittest.TestCase):

    def test_every_relative_link_resolves(self):
        names = documents(ROOT)
        self.assertTrue(any(n.startswith("docs" + os.sep) for n in names), "docs/*.md not found")
        problems = []
        checked = 0
        for name in names:
            path = os.path.join(ROOT, name)
            self.assertTrue(os.path.isfile(path), "%s is missing" % name)
            problems += broken_links(path, ROOT)
            with open(path, encoding="utf-8") as f:
                checked += len(links(f.read()))
        # The front page links to every topic; if the parser found nothing it is broken too.
        self.assertGreater(checked, 20)
        if problems:
            self.fail("%d broken links:\n%s" % (len(problems), "\n".join(problems)))

    def test_broken_links_are_reported(self):
        with tempfile.TemporaryDirectory() as root:
            os.mkdir(os.path.join(root, "docs"))
            with open(os.path.join(root, "docs", "topic.md"), "w", encoding="utf-8") as f:
                f.write("# A topic\n\n## `sprig bench --json`\n\n## Limits\n\n## Limits\n")
            with open(os.path.join(root, "README.md"), "w", encoding="utf-8") as f:
                f.write("# Front\n\n"
                        "[fine](docs/topic.md) [fine](docs/topic.md#sprig-bench---json)\n"
                        "[fine](docs/topic.md#limits-1) [fine](#front) [fine](docs)\n"
                        "[web](https://example.org/missing.md)\n"
                        "[gone](docs/missing.md) [bad anchor](docs/topic.md#limitations)\n"
                        "[over two\nlines](docs/nowhere.md) ![image](pictures/none.png)\n"
                        "[same file](#nothing) [ref]: docs/unlisted.md\n"
                        "[ref]: docs/unlisted.md\n"
                        "`[in code](docs/absent.md)`\n"
                        "```\n[in a block](docs/absent.md)\n```\n"
                        "a lone ` in a paragraph\n\n[after it](docs/after.md) `code`\n")
            problems = broken_links(os.path.join(root, "README.md"), root)
        self.assertEqual(problems, [
            "README.md:6: docs/missing.md: no such file or folder",
            "README.md:6: docs/topic.md#limitations: no heading with the anchor 'limitations' "
            "in docs/topic.md",
            "README.md:7: docs/nowhere.md: no such file or folder",
            "README.md:8: pictures/none.png: no such file or folder",
            "README.md:9: #nothing: no heading with the anchor 'nothing' in README.md",
            "README.md:10: docs/unlisted.md: no such file or folder",
            "README.md:17: docs/after.md: no such file or folder",
        ])

    def test_slugs_follow_the_github_rule(self):
        self.assertEqual(slug("`sprig bench --json`"), "sprig-bench---json")
        self.assertEqual(slug("Input: `config.json` and weights"), "input-configjson-and-weights")
        self.assertEqual(slug("ARM laptops (aarch64 Linux)"), "arm-laptops-aarch64-linux")
        self.assertEqual(slug("Hostile input and heavy use: fuzzing and sanitizers"),
                         "hostile-input-and-heavy-use-fuzzing-and-sanitizers")
        self.assertEqual(slug("See [the file](file.md) now"), "see-the-file-now")
        self.assertEqual(slug("snake_case stays"), "snake_case-stays")


if __name__ == "__main__":
    unittest.main()
