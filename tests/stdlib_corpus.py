"""A labelled corpus of real text present wherever Python is: standard-library docstrings.

Every public function, class and method docstring of at least `MIN_WORDS` words of a
fixed list of modules becomes one document, labelled by its module. Nobody on the
project wrote these texts, so they can check what the map finds. The corpus depends on
the running Python's standard library; the figures quoted in the tests that use it were
measured on CPython 3.11.
"""

from __future__ import annotations

import importlib
import inspect
import warnings
from dataclasses import dataclass
from functools import cache
from types import ModuleType
from typing import Any

import numpy as np
import scipy.sparse as sp

from service.text.tokenize import make_tokenizer

# Modules with at least ~20 long docstrings each and distinct subjects (measured by
# counting, CPython 3.11). Several share vocabulary on purpose (imaplib / smtplib are
# both protocol clients; decimal / statistics both arithmetic; doctest / unittest.case
# both testing), so neighbours have something to get wrong.
MODULES = (
    "codecs",
    "decimal",
    "difflib",
    "doctest",
    "email.message",
    "http.cookiejar",
    "imaplib",
    "inspect",
    "ipaddress",
    "logging",
    "pdb",
    "shutil",
    "smtplib",
    "ssl",
    "statistics",
    "tarfile",
    "threading",
    "typing",
    "unittest.case",
    "xml.etree.ElementTree",
)
MIN_WORDS = 20


@dataclass(frozen=True)
class Corpus:
    counts: sp.csr_matrix  # (n_docs, n_terms) int64 raw counts
    labels: np.ndarray  # (n_docs,) int64 index into MODULES
    terms: tuple[str, ...]  # column j is terms[j]
    texts: tuple[str, ...]


def _doc(obj: Any) -> str | None:
    text = getattr(obj, "__doc__", None)
    return text if isinstance(text, str) and len(text.split()) >= MIN_WORDS else None


def module_docstrings(module: ModuleType) -> list[str]:
    """Docstrings of the module's own public functions, classes and their methods."""
    found: list[str | None] = []
    for name, obj in sorted(vars(module).items()):
        # Only objects defined here: re-exported names would copy another module's text.
        if name.startswith("_") or getattr(obj, "__module__", None) != module.__name__:
            continue
        if inspect.isclass(obj):
            found.append(_doc(obj))
            for member_name, member in sorted(vars(obj).items()):
                if member_name.startswith("_"):
                    continue
                if isinstance(member, staticmethod | classmethod):
                    member = member.__func__
                elif isinstance(member, property):
                    member = member.fget
                if callable(member):
                    found.append(_doc(member))
        elif callable(obj):
            found.append(_doc(obj))
    return [text for text in found if text is not None]


@cache
def stdlib_corpus() -> Corpus:
    """The corpus of `MODULES`, tokenised with the service's English tokenizer."""
    tokenizer = make_tokenizer("english")
    texts: list[str] = []
    labels: list[int] = []
    for label, name in enumerate(MODULES):
        with warnings.catch_warnings():
            # typing's deprecated namespaces (typing.io, typing.re) warn when touched.
            warnings.simplefilter("ignore", DeprecationWarning)
            found = module_docstrings(importlib.import_module(name))
        texts.extend(found)
        labels.extend([label] * len(found))
    vocabulary: dict[str, int] = {}
    rows: list[int] = []
    cols: list[int] = []
    values: list[int] = []
    for row, text in enumerate(texts):
        for term, count in tokenizer.count(text).items():
            rows.append(row)
            cols.append(vocabulary.setdefault(term, len(vocabulary)))
            values.append(count)
    counts = sp.csr_matrix(
        (np.array(values, dtype=np.int64), (rows, cols)), shape=(len(texts), len(vocabulary))
    )
    terms = tuple(sorted(vocabulary, key=vocabulary.__getitem__))
    return Corpus(counts, np.array(labels, dtype=np.int64), terms, tuple(texts))
