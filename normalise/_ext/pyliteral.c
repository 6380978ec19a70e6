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

static PyMethodDef methods[] = {
    {"py_to_json", py_to_json, METH_O, "JSON text for a Python literal in the shared subset, else None."},
    {"many_py_to_json", many_py_to_json, METH_O, "py_to_json over a sequence; returns a list."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_pyliteral", NULL, -1, methods};

PyMODINIT_FUNC PyInit__pyliteral(void) { return PyModule_Create(&module); }
