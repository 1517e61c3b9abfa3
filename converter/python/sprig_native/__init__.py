"""sprig_native: sprig's runtime in-process from Python, over its C API (sprig.h) with ctypes.

No compile step: it loads the shared library libsprig.so, found as (first that exists) the
SPRIG_LIBRARY environment variable, ../../build/lib/libsprig.so relative to this file (a
source tree built with `make build`), or the system's library path (an installed sprig).

    import numpy as np, sprig_native
    with sprig_native.Model("orchard.sprig") as model:
        session = sprig_native.Session(model, threads=2)
        y = session.forward(np.zeros((4, model.input_dim), np.float32))
        print(session.stats(), session.touched(), model.residency(),
              sprig_native.process_memory())

A Model is immutable and may be shared by threads; use one Session per thread. Errors raise
SprigError with the C API's code and message; an input the model does not take (its shape,
family, length, tokens or values) is judged by the runtime's input rules, whose message comes
through unchanged. Outputs are whatever the model computes; a
model's predictions and generated text can be wrong.
"""

import ctypes
import ctypes.util
import os

import numpy as np

__all__ = ["Model", "Session", "SprigError", "process_memory", "library_path", "version"]

FAMILY_STACK, FAMILY_TRANSFORMER = 1, 2
_INPUT_ROWS, _INPUT_TOKENS = 1, 2


class SprigError(Exception):
    """A failed sprig call: `code` is the C API's status code, the message says why."""

    def __init__(self, code, message):
        super().__init__(message)
        self.code = code


class _SessionStats(ctypes.Structure):
    _fields_ = [(name, ctypes.c_uint64) for name in (
        "forward_calls", "rows", "sequence_tokens", "prefill_tokens", "decode_tokens",
        "generated_tokens")] + [(name, ctypes.c_double) for name in (
            "forward_seconds", "prefill_seconds", "decode_seconds")] + [
                ("routed_layers", ctypes.c_size_t)]


class _Residency(ctypes.Structure):
    _fields_ = [(name, ctypes.c_uint64) for name in (
        "hot_size", "hot_resident", "records_size", "records_resident")]


class _ProcessMemory(ctypes.Structure):
    _fields_ = [(name, ctypes.c_uint64) for name in (
        "rss", "peak_rss", "rss_file", "rss_anon", "minor_faults", "major_faults")]


class _GenerateOptions(ctypes.Structure):
    _fields_ = [("count", ctypes.c_size_t), ("temperature", ctypes.c_float),
                ("top_p", ctypes.c_float), ("seed", ctypes.c_uint64)]


_TOKEN_CALLBACK = ctypes.CFUNCTYPE(ctypes.c_int, ctypes.c_int32, ctypes.c_void_p)


def library_path():
    """Where libsprig.so is loaded from (see the module docstring)."""
    env = os.environ.get("SPRIG_LIBRARY")
    if env:
        return env
    here = os.path.dirname(os.path.abspath(__file__))
    in_tree = os.path.normpath(os.path.join(here, "..", "..", "..", "build", "lib", "libsprig.so"))
    if os.path.exists(in_tree):
        return in_tree
    found = ctypes.util.find_library("sprig")
    if found is None:
        raise OSError("libsprig.so not found: build sprig, install it, or set SPRIG_LIBRARY")
    return found


def _declare(lib):
    p, sz, u64 = ctypes.c_void_p, ctypes.c_size_t, ctypes.c_uint64
    err = ctypes.POINTER(ctypes.c_void_p)  # char**: read with string_at, freed with sprig_free
    signatures = {
        "sprig_version": (ctypes.c_char_p, []),
        "sprig_free": (None, [p]),
        "sprig_model_open": (ctypes.c_int, [ctypes.c_char_p, ctypes.POINTER(p), err]),
        "sprig_model_close": (None, [p]),
        "sprig_model_family": (ctypes.c_int, [p]),
        "sprig_model_layer_count": (sz, [p]),
        "sprig_model_input_dim": (sz, [p]),
        "sprig_model_vocab_size": (sz, [p]),
        "sprig_model_max_seq": (sz, [p]),
        "sprig_model_output_dim": (sz, [p]),
        "sprig_model_tokens_output_size": (sz, [p, sz, sz]),
        "sprig_model_output_shape": (ctypes.c_int, [p, ctypes.c_int, ctypes.POINTER(u64), sz,
                                                    ctypes.POINTER(u64), ctypes.POINTER(sz),
                                                    err]),
        "sprig_model_check_tokens": (ctypes.c_int, [p, p, sz, sz, err]),
        "sprig_model_verify_checksums": (ctypes.c_int, [p, err]),
        "sprig_model_residency": (None, [p, ctypes.POINTER(_Residency)]),
        "sprig_model_encode": (ctypes.c_int, [p, ctypes.c_char_p, sz,
                                              ctypes.POINTER(ctypes.POINTER(ctypes.c_int32)),
                                              ctypes.POINTER(sz), err]),
        "sprig_model_decode": (ctypes.c_int, [p, p, sz, ctypes.POINTER(p), ctypes.POINTER(sz),
                                              err]),
        "sprig_session_create": (ctypes.c_int, [p, sz, ctypes.POINTER(p), err]),
        "sprig_session_destroy": (None, [p]),
        "sprig_session_threads": (sz, [p]),
        "sprig_session_kernel_path": (ctypes.c_char_p, [p]),
        "sprig_session_forward": (ctypes.c_int, [p, p, sz, p, err]),
        "sprig_session_forward_tokens": (ctypes.c_int, [p, p, sz, sz, p, err]),
        "sprig_session_reset": (None, [p]),
        "sprig_session_position": (sz, [p]),
        "sprig_generate_options_default": (None, [ctypes.POINTER(_GenerateOptions)]),
        "sprig_session_generate": (ctypes.c_int, [p, p, sz, ctypes.POINTER(_GenerateOptions),
                                                  _TOKEN_CALLBACK, p, err]),
        "sprig_session_stats": (None, [p, ctypes.POINTER(_SessionStats)]),
        "sprig_session_reset_stats": (None, [p]),
        "sprig_session_touched": (ctypes.c_int, [p, sz, ctypes.POINTER(sz), ctypes.POINTER(u64),
                                                 ctypes.POINTER(u64), ctypes.POINTER(u64), err]),
        "sprig_process_memory": (None, [ctypes.POINTER(_ProcessMemory)]),
    }
    for name, (restype, argtypes) in signatures.items():
        fn = getattr(lib, name)
        fn.restype, fn.argtypes = restype, argtypes
    return lib


_lib = None


def _library():
    global _lib
    if _lib is None:
        _lib = _declare(ctypes.CDLL(library_path()))
    return _lib


def _check(code, err):
    """Raises SprigError for a non-zero code, freeing the C message `err` (a c_void_p)."""
    if code == 0:
        return
    message = "sprig failed"
    if err.value:
        message = ctypes.string_at(err.value).decode("utf-8", "replace")
        _library().sprig_free(err)
    raise SprigError(code, message)


def _output(out, shape):
    """A float32 array of `shape` to write into: `out` itself when it fits, else a new one."""
    if out is None:
        return np.empty(shape, dtype=np.float32)
    if (out.dtype != np.float32 or not out.flags.c_contiguous or not out.flags.writeable
            or out.size != int(np.prod(shape))):
        raise ValueError(f"out must be a writable C-contiguous float32 array of {list(shape)}")
    return out.reshape(shape)


def _struct_dict(s):
    return {name: getattr(s, name) for name, _ in s._fields_}


class Model:
    """An open .sprig file (sprig_model_open). Close it, or use it as a context manager."""

    def __init__(self, path):
        lib = _library()
        self._handle = ctypes.c_void_p()
        err = ctypes.c_void_p()
        _check(lib.sprig_model_open(os.fsencode(path), ctypes.byref(self._handle),
                                    ctypes.byref(err)), err)
        self.path = path
        self.family = "stack" if lib.sprig_model_family(self._handle) == FAMILY_STACK \
            else "transformer"
        self.layer_count = lib.sprig_model_layer_count(self._handle)
        self.input_dim = lib.sprig_model_input_dim(self._handle)
        self.output_dim = lib.sprig_model_output_dim(self._handle)
        self.vocab_size = lib.sprig_model_vocab_size(self._handle)
        self.max_seq = lib.sprig_model_max_seq(self._handle)

    def _output_shape(self, kind, input_shape):
        """The output's shape for an input of `input_shape` under the runtime's input rules
        (sprig_model_output_shape); raises SprigError naming a rule the input breaks."""
        dims = (ctypes.c_uint64 * max(1, len(input_shape)))(*input_shape)
        out = (ctypes.c_uint64 * 3)()
        rank = ctypes.c_size_t()
        err = ctypes.c_void_p()
        _check(_library().sprig_model_output_shape(self._handle, kind, dims, len(input_shape),
                                                   out, ctypes.byref(rank), ctypes.byref(err)),
               err)
        return tuple(out[i] for i in range(rank.value))

    def residency(self):
        """Bytes of the hot and record sections in the page cache now, and their sizes."""
        r = _Residency()
        _library().sprig_model_residency(self._handle, ctypes.byref(r))
        return _struct_dict(r)

    def encode(self, text):
        """UTF-8 text (a str) -> token ids (a list of int) with the model's tokenizer, no begin
        or end token added (sprig_model_encode). Raises SprigError for a model without a
        tokenizer."""
        data = text.encode("utf-8", "surrogateescape") if isinstance(text, str) else bytes(text)
        ids = ctypes.POINTER(ctypes.c_int32)()
        count = ctypes.c_size_t()
        err = ctypes.c_void_p()
        lib = _library()
        _check(lib.sprig_model_encode(self._handle, data, len(data), ctypes.byref(ids),
                                      ctypes.byref(count), ctypes.byref(err)), err)
        try:
            return [ids[i] for i in range(count.value)]
        finally:
            if ids:
                lib.sprig_free(ctypes.cast(ids, ctypes.c_void_p))

    def decode(self, ids):
        """Token ids -> text (a str) with the model's tokenizer (sprig_model_decode). Bytes that
        do not form UTF-8 (possible with the byte tokenizer) become U+FFFD."""
        array = np.ascontiguousarray(np.asarray(list(ids), dtype=np.int64))
        if array.size and (array.min() < -2**31 or array.max() >= 2**31):
            raise SprigError(1, "decode: a token id does not fit in 32 bits")
        narrow = array.astype(np.int32)
        text = ctypes.c_void_p()
        length = ctypes.c_size_t()
        err = ctypes.c_void_p()
        lib = _library()
        _check(lib.sprig_model_decode(self._handle, narrow.ctypes.data_as(ctypes.c_void_p),
                                      narrow.size, ctypes.byref(text), ctypes.byref(length),
                                      ctypes.byref(err)), err)
        try:
            return ctypes.string_at(text.value, length.value).decode("utf-8", "replace")
        finally:
            lib.sprig_free(text)

    def verify_checksums(self):
        """Reads every weight against its checksum; raises SprigError on a mismatch."""
        err = ctypes.c_void_p()
        _check(_library().sprig_model_verify_checksums(self._handle, ctypes.byref(err)), err)

    def close(self):
        if self._handle:
            _library().sprig_model_close(self._handle)
            self._handle = ctypes.c_void_p()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __del__(self):
        try:
            self.close()
        except Exception:  # interpreter shutdown: the library may be gone already
            pass


class Session:
    """Inference state over a Model (sprig_session_create); one per thread."""

    def __init__(self, model, threads=1):
        lib = _library()
        self.model = model
        self._handle = ctypes.c_void_p()
        err = ctypes.c_void_p()
        _check(lib.sprig_session_create(model._handle, threads, ctypes.byref(self._handle),
                                        ctypes.byref(err)), err)
        self.threads = lib.sprig_session_threads(self._handle)
        self.kernel_path = lib.sprig_session_kernel_path(self._handle).decode()

    def forward(self, rows, out=None):
        """Stack models: float rows [N, input_dim] (or one row [input_dim]) -> float32
        [N, output_dim]. `out`, when given, is a C-contiguous float32 array of that shape to
        write into (no allocation)."""
        x = np.ascontiguousarray(rows, dtype=np.float32)
        shape = self.model._output_shape(_INPUT_ROWS, x.shape)
        y = _output(out, shape)
        err = ctypes.c_void_p()
        _check(_library().sprig_session_forward(self._handle, x.ctypes.data, shape[0],
                                                y.ctypes.data, ctypes.byref(err)), err)
        return y

    def forward_tokens(self, tokens, out=None):
        """Transformer models: int tokens [B, T] (or one sequence [T]) -> logits [B, T, V],
        class scores [B, C] or hidden states [B, T, D], as float32. `out` as in forward, of as
        many values."""
        t = np.asarray(tokens)
        shape = self.model._output_shape(_INPUT_TOKENS, t.shape)
        b, n = shape[0], t.shape[-1]
        if t.dtype != np.int32:
            # Checked as int64 first: a token outside int32 would change in the narrowing.
            wide = np.ascontiguousarray(t, dtype=np.int64)
            err = ctypes.c_void_p()
            _check(_library().sprig_model_check_tokens(self.model._handle, wide.ctypes.data, b, n,
                                                       ctypes.byref(err)), err)
        t = np.ascontiguousarray(t, dtype=np.int32)
        y = _output(out, shape)
        err = ctypes.c_void_p()
        _check(_library().sprig_session_forward_tokens(self._handle, t.ctypes.data, b, n,
                                                       y.ctypes.data, ctypes.byref(err)), err)
        return y

    def generate(self, prompt, count=64, temperature=1.0, top_p=1.0, seed=1):
        """Continues `prompt` (token ids; a str is encoded with the model's tokenizer, and bytes
        are byte-tokenizer ids); returns the new token ids."""
        if isinstance(prompt, str):
            prompt = self.model.encode(prompt)
        p = np.ascontiguousarray(list(prompt), dtype=np.int32)
        options = _GenerateOptions()
        _library().sprig_generate_options_default(ctypes.byref(options))
        options.count, options.temperature, options.top_p, options.seed = (
            count, temperature, top_p, seed)
        tokens = []

        def keep(token, _user):
            tokens.append(token)
            return 1

        callback = _TOKEN_CALLBACK(keep)  # kept alive for the duration of the call
        err = ctypes.c_void_p()
        _check(_library().sprig_session_generate(self._handle, p.ctypes.data, len(p),
                                                 ctypes.byref(options), callback, None,
                                                 ctypes.byref(err)), err)
        return tokens

    def stats(self):
        """Counters of the work done since creation or reset_stats (sprig_session_stats)."""
        s = _SessionStats()
        _library().sprig_session_stats(self._handle, ctypes.byref(s))
        return _struct_dict(s)

    def touched(self):
        """Per layer with records: the distinct records read, of how many, and their size."""
        out = []
        for i in range(self.stats()["routed_layers"]):
            layer, touched, records, size = (ctypes.c_size_t(), ctypes.c_uint64(),
                                             ctypes.c_uint64(), ctypes.c_uint64())
            err = ctypes.c_void_p()
            _check(_library().sprig_session_touched(
                self._handle, i, ctypes.byref(layer), ctypes.byref(touched),
                ctypes.byref(records), ctypes.byref(size), ctypes.byref(err)), err)
            out.append({"layer": layer.value, "touched": touched.value,
                        "records": records.value, "record_size": size.value})
        return out

    def reset(self):
        """Empties the KV cache."""
        _library().sprig_session_reset(self._handle)

    def reset_stats(self):
        _library().sprig_session_reset_stats(self._handle)

    def close(self):
        if self._handle:
            _library().sprig_session_destroy(self._handle)
            self._handle = ctypes.c_void_p()

    def __del__(self):
        try:
            self.close()
        except Exception:
            pass


def process_memory():
    """This process's resident memory and page faults (sprig_process_memory)."""
    m = _ProcessMemory()
    _library().sprig_process_memory(ctypes.byref(m))
    return _struct_dict(m)


def version():
    return _library().sprig_version().decode()
