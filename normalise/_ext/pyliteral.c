/*
 * Rewrite Python-literal text as JSON text, for the shared subset of the two grammars.
 *
 * py_to_json(str) returns JSON text that json.loads turns into exactly the value
 * ast.literal_eval gives for the input, or None when the input leaves the subset
 * (tuples, sets, string prefixes, octal or named escapes, surrogate escapes, raw
 * control characters, anything that is not a literal token). None is not an
 * error: the caller then takes the exact path. Nothing here judges whether the
 * input is well formed; json.loads does that on the result, and any text it
 * refuses also goes to the exact path.
 *
 * Escapes follow the Python language reference, "String and Bytes literals";
 * the output follows RFC 8259, section 7.
 *
 * surrogate_escapes(texts) lists the texts holding an escape that may give a
 * lone surrogate (\uD800-\uDFFF, or \U0000D800-\U0000DFFF in Python), so
 * that the exact check in Python (literal.check_escapes, RFC 8259 section 8.2)
 * runs on those alone. It finds what literal._SURROGATE_ESCAPE finds, with
 * memchr over the text's own buffer instead of a scan per cell in Python.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <stdlib.h>
#include <string.h>

static int hexval(unsigned char c) {
    if (c >= '0' && c <= '9') return c - '0';
    if (c >= 'a' && c <= 'f') return c - 'a' + 10;
    if (c >= 'A' && c <= 'F') return c - 'A' + 10;
    return -1;
}

static int is_ident(unsigned char c) {
    return (c >= 'a' && c <= 'z') || (c >= 'A' && c <= 'Z') || (c >= '0' && c <= '9') || c == '_' || c >= 0x80;
}

/* Append code point cp (not a surrogate, <= 0x10FFFF) as UTF-8. */
static char *put_utf8(char *o, unsigned long cp) {
    if (cp < 0x80) { *o++ = (char)cp; }
    else if (cp < 0x800) { *o++ = (char)(0xC0 | (cp >> 6)); *o++ = (char)(0x80 | (cp & 0x3F)); }
    else if (cp < 0x10000) {
        *o++ = (char)(0xE0 | (cp >> 12)); *o++ = (char)(0x80 | ((cp >> 6) & 0x3F)); *o++ = (char)(0x80 | (cp & 0x3F));
    } else {
        *o++ = (char)(0xF0 | (cp >> 18)); *o++ = (char)(0x80 | ((cp >> 12) & 0x3F));
        *o++ = (char)(0x80 | ((cp >> 6) & 0x3F)); *o++ = (char)(0x80 | (cp & 0x3F));
    }
    return o;
}

static char *put_u(char *o, unsigned long cp) {  /* \u00XX form for a BMP code point */
    static const char *hex = "0123456789abcdef";
    *o++ = '\\'; *o++ = 'u';
    *o++ = hex[(cp >> 12) & 15]; *o++ = hex[(cp >> 8) & 15]; *o++ = hex[(cp >> 4) & 15]; *o++ = hex[cp & 15];
    return o;
}

/* Returns the length written to out, or -1 when the text leaves the shared subset. */
static Py_ssize_t convert(const unsigned char *s, Py_ssize_t n, char *out) {
    char *o = out;
    Py_ssize_t i = 0;
    while (i < n) {
        unsigned char c = s[i];
        if (c == '\'' || c == '"') {
            unsigned char q = c;
            i++;
            *o++ = '"';
            for (;;) {
                if (i >= n) return -1;
                c = s[i];
                if (c == q) { *o++ = '"'; i++; break; }
                if (c < 0x20) return -1;               /* raw control character */
                if (c == '"') { *o++ = '\\'; *o++ = '"'; i++; continue; }
                if (c != '\\') { *o++ = (char)c; i++; continue; }
                if (i + 1 >= n) return -1;
                c = s[i + 1];
                i += 2;
                switch (c) {
                case '\\': *o++ = '\\'; *o++ = '\\'; break;
                case '\'': *o++ = '\''; break;
                case '"': *o++ = '\\'; *o++ = '"'; break;
                case 'n': *o++ = '\\'; *o++ = 'n'; break;
                case 't': *o++ = '\\'; *o++ = 't'; break;
                case 'r': *o++ = '\\'; *o++ = 'r'; break;
                case 'b': *o++ = '\\'; *o++ = 'b'; break;
                case 'f': *o++ = '\\'; *o++ = 'f'; break;
                case 'a': o = put_u(o, 7); break;
                case 'v': o = put_u(o, 11); break;
                case 'x': {
                    int h1, h2;
                    if (i + 2 > n || (h1 = hexval(s[i])) < 0 || (h2 = hexval(s[i + 1])) < 0) return -1;
                    o = put_u(o, (unsigned long)(h1 * 16 + h2));
                    i += 2;
                    break;
                }
                case 'u': case 'U': {
                    int digits = c == 'u' ? 4 : 8;
                    unsigned long cp = 0;
                    if (i + digits > n) return -1;
                    for (int k = 0; k < digits; k++) {
                        int h = hexval(s[i + k]);
                        if (h < 0) return -1;
                        cp = cp * 16 + (unsigned long)h;
                    }
                    /* a surrogate escape gives a lone surrogate in Python, a pair in JSON */
                    if (cp > 0x10FFFF || (cp >= 0xD800 && cp <= 0xDFFF)) return -1;
                    i += digits;
                    if (cp < 0x20 || cp == '"' || cp == '\\') o = put_u(o, cp);
                    else o = put_utf8(o, cp);
                    break;
                }
                default:  /* octal, \N{...}, line continuation, unknown escapes */
                    return -1;
                }
            }
            continue;
        }
        switch (c) {
        case ' ': case '\t': case '\n': case '\r':
        case '[': case ']': case '{': case '}': case ',': case ':':
        case '0': case '1': case '2': case '3': case '4': case '5': case '6': case '7': case '8': case '9':
        case '.': case '+': case '-': case 'e': case 'E':
            *o++ = (char)c;
            i++;
            continue;
        case 'N':
            if (i + 4 <= n && memcmp(s + i, "None", 4) == 0 && (i + 4 == n || !is_ident(s[i + 4]))
                && (i == 0 || !is_ident(s[i - 1]))) {
                memcpy(o, "null", 4); o += 4; i += 4; continue;
            }
            return -1;
        case 'T':
            if (i + 4 <= n && memcmp(s + i, "True", 4) == 0 && (i + 4 == n || !is_ident(s[i + 4]))
                && (i == 0 || !is_ident(s[i - 1]))) {
                memcpy(o, "true", 4); o += 4; i += 4; continue;
            }
            return -1;
        case 'F':
            if (i + 5 <= n && memcmp(s + i, "False", 5) == 0 && (i + 5 == n || !is_ident(s[i + 5]))
                && (i == 0 || !is_ident(s[i - 1]))) {
                memcpy(o, "false", 5); o += 5; i += 5; continue;
            }
            return -1;
        default:
            return -1;
        }
    }
    return o - out;
}

static PyObject *one(PyObject *text) {
    Py_ssize_t n;
    const char *s;
    if (!PyUnicode_Check(text)) Py_RETURN_NONE;
    s = PyUnicode_AsUTF8AndSize(text, &n);
    if (s == NULL) {  /* lone surrogates cannot be UTF-8: exact path */
        PyErr_Clear();
        Py_RETURN_NONE;
    }
    if (memchr(s, 0, (size_t)n) != NULL) Py_RETURN_NONE;
    char *out = (char *)malloc((size_t)n * 3 + 16);  /* worst case: \a (2 bytes) becomes \u0007 (6) */
    if (out == NULL) return PyErr_NoMemory();
    Py_ssize_t len = convert((const unsigned char *)s, n, out);
    PyObject *result;
    if (len < 0) {
        Py_INCREF(Py_None);
        result = Py_None;
    } else {
        result = PyUnicode_DecodeUTF8(out, len, "strict");
    }
    free(out);
    return result;
}

static PyObject *py_to_json(PyObject *self, PyObject *text) {
    return one(text);
}

static PyObject *many_py_to_json(PyObject *self, PyObject *texts) {
    PyObject *seq = PySequence_Fast(texts, "expected a sequence of str");
    if (seq == NULL) return NULL;
    Py_ssize_t n = PySequence_Fast_GET_SIZE(seq);
    PyObject *out = PyList_New(n);
    if (out == NULL) { Py_DECREF(seq); return NULL; }
    PyObject **items = PySequence_Fast_ITEMS(seq);
    for (Py_ssize_t k = 0; k < n; k++) {
        PyObject *r = one(items[k]);
        if (r == NULL) { Py_DECREF(out); Py_DECREF(seq); return NULL; }
        PyList_SET_ITEM(out, k, r);
    }
    Py_DECREF(seq);
    return out;
}

/* Index of the first backslash at or after i, or -1. memchr looks for the byte 0x5C;
   in a 2- or 4-byte buffer that byte may be part of another character, so the code
   unit holding it is checked, and the search goes on after that unit. */
static Py_ssize_t next_backslash(int kind, const void *data, Py_ssize_t n, Py_ssize_t i) {
    const char *bytes = (const char *)data;
    while (i < n) {
        const char *hit = memchr(bytes + i * kind, '\\', (size_t)((n - i) * kind));
        if (hit == NULL) return -1;
        Py_ssize_t unit = (hit - bytes) / kind;
        if (PyUnicode_READ(kind, data, unit) == '\\') return unit;
        i = unit + 1;
    }
    return -1;
}

/* Whether the backslash at i starts u + D + 8-F, or U0000 + D + 8-F (a surrogate's first two digits). */
static int surrogate_escape_at(int kind, const void *data, Py_ssize_t n, Py_ssize_t i) {
    Py_ssize_t j;
    Py_UCS4 c;
    if (i + 3 < n && PyUnicode_READ(kind, data, i + 1) == 'u') {
        j = i + 2;
    } else if (i + 7 < n && PyUnicode_READ(kind, data, i + 1) == 'U'
               && PyUnicode_READ(kind, data, i + 2) == '0' && PyUnicode_READ(kind, data, i + 3) == '0'
               && PyUnicode_READ(kind, data, i + 4) == '0' && PyUnicode_READ(kind, data, i + 5) == '0') {
        j = i + 6;
    } else {
        return 0;
    }
    c = PyUnicode_READ(kind, data, j);
    if (c != 'd' && c != 'D') return 0;
    c = PyUnicode_READ(kind, data, j + 1);
    return (c >= '8' && c <= '9') || (c >= 'a' && c <= 'f') || (c >= 'A' && c <= 'F');
}

static PyObject *surrogate_escapes(PyObject *self, PyObject *texts) {
    PyObject *seq = PySequence_Fast(texts, "expected a sequence of str");
    if (seq == NULL) return NULL;
    Py_ssize_t count = PySequence_Fast_GET_SIZE(seq);
    PyObject **items = PySequence_Fast_ITEMS(seq);
    PyObject *found = PyList_New(0);
    if (found == NULL) { Py_DECREF(seq); return NULL; }
    for (Py_ssize_t k = 0; k < count; k++) {
        PyObject *text = items[k];
        if (!PyUnicode_Check(text)) {
            PyErr_Format(PyExc_TypeError, "expected str, got %.80s", Py_TYPE(text)->tp_name);
            goto fail;
        }
#if PY_VERSION_HEX < 0x030C0000
        if (PyUnicode_READY(text) < 0) goto fail;  /* a no-op from Python 3.12 */
#endif
        int kind = PyUnicode_KIND(text);
        const void *data = PyUnicode_DATA(text);
        Py_ssize_t n = PyUnicode_GET_LENGTH(text);
        for (Py_ssize_t i = next_backslash(kind, data, n, 0); i >= 0; i = next_backslash(kind, data, n, i + 1)) {
            if (surrogate_escape_at(kind, data, n, i)) {
                PyObject *index = PyLong_FromSsize_t(k);
                if (index == NULL || PyList_Append(found, index) < 0) { Py_XDECREF(index); goto fail; }
                Py_DECREF(index);
                break;
            }
        }
    }
    Py_DECREF(seq);
    return found;
fail:
    Py_DECREF(found);
    Py_DECREF(seq);
    return NULL;
}

static PyMethodDef methods[] = {
    {"py_to_json", py_to_json, METH_O, "JSON text for a Python literal in the shared subset, else None."},
    {"many_py_to_json", many_py_to_json, METH_O, "py_to_json over a sequence; returns a list."},
    {"surrogate_escapes", surrogate_escapes, METH_O,
     "Indices of the texts holding a surrogate escape (\\uD800-\\uDFFF, \\U0000D800-\\U0000DFFF)."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_pyliteral", NULL, -1, methods};

PyMODINIT_FUNC PyInit__pyliteral(void) { return PyModule_Create(&module); }
