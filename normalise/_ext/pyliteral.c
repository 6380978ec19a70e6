/*
 * Rewrite Python-literal text as JSON text, for the shared subset of the two grammars.
 *
 * py_to_json(str) returns JSON text that json.loads turns into exactly the value
 * ast.literal_eval gives for the input, or None when the input leaves the subset
 * (tuples, sets, string prefixes, octal or named escapes, surrogate escapes, raw
 * control characters, anything that is not a literal token). None is not an
 * error: the caller then takes the exact path. Nothing here judges whether the
 * input is well formed; the JSON reader does that on the result, and any text it
 * refuses also goes to the exact path.
 *
 * Escapes follow the Python language reference, "String and Bytes literals";
 * the output follows RFC 8259, section 7.
 *
 * json_values(texts, ...) reads a whole column of JSON texts into the values
 * json.loads gives for them; see "JSON cells to values" below.
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

/* --- JSON cells to values -----------------------------------------------------------
 *
 * json_values(texts, max_depth, max_chars, raw_surrogates, left) reads a column of JSON
 * texts (RFC 8259) into the values json.loads returns for them: the same types, the same
 * dict key order, ints of any size (PyLong_FromString beyond 18 digits) and floats read by
 * PyOS_string_to_double, as float() reads them. It returns (values, rows): ``left`` stands
 * in ``values`` for each cell it does not read, and ``rows`` lists those cells, for the
 * exact path in Python, which decides and says why. It leaves a cell that:
 *   - is not valid JSON, or holds NaN or Infinity (RFC 8259, section 6);
 *   - is longer than max_chars, or nested deeper than max_depth (or JV_MAX_DEPTH);
 *   - holds an escape that gives a lone surrogate (RFC 8259, section 8.2), or, with
 *     raw_surrogates, a raw one (bytes the file's encoding could not read);
 *   - meets any error from Python (an integer beyond the interpreter's digit limit).
 * Strings follow json's scanner: raw control characters refused, an escaped high and low
 * surrogate in a row joined into one character. Object keys are made once per column and
 * shared between cells, as json.loads shares them within a text; strings are immutable,
 * so no value can tell the difference.
 */

#define JV_MAX_DEPTH 512          /* deeper cells take the exact path, whatever the limit */
#define JV_KEY_SLOTS_MIN 64       /* powers of two; a table is at most half full, */
#define JV_KEY_SLOTS_MAX 16384    /* and once the largest is, further keys are made per use */
#define JV_KEY_MAX_LEN 64         /* longer keys are made per use */

typedef struct {
    PyObject *key;                /* owned */
    Py_uhash_t hash;
} KeySlot;

typedef struct {
    PyObject *text;
    int kind;
    const void *data;
    Py_ssize_t n, i;
    int depth, max_depth, raw_surrogates;
    Py_UCS4 *buf;                 /* a string's characters, when it holds escapes */
    Py_ssize_t buf_cap;
    PyObject **stack;             /* items of the arrays being read */
    Py_ssize_t stack_len, stack_cap;
    KeySlot *keys;
    size_t key_slots, keys_used;
} JsonReader;

#define JV_READ(r, k) PyUnicode_READ((r)->kind, (r)->data, (k))
#define JV_IS_SURROGATE(c) ((c) >= 0xD800 && (c) <= 0xDFFF)

static PyObject *jv_value(JsonReader *r);

static void jv_skip_space(JsonReader *r) {
    while (r->i < r->n) {
        Py_UCS4 c = JV_READ(r, r->i);
        if (c != ' ' && c != '\t' && c != '\n' && c != '\r') break;
        r->i++;
    }
}

static int jv_same_text(PyObject *s, int kind, const void *data, Py_ssize_t len) {
    if (PyUnicode_GET_LENGTH(s) != len) return 0;
    int skind = PyUnicode_KIND(s);
    const void *sdata = PyUnicode_DATA(s);
    if (skind == kind) return memcmp(sdata, data, (size_t)(len * kind)) == 0;
    for (Py_ssize_t k = 0; k < len; k++)
        if (PyUnicode_READ(skind, sdata, k) != PyUnicode_READ(kind, data, k)) return 0;
    return 1;
}

/* Double the key table; a table that cannot grow stays as it is. */
static void jv_grow_keys(JsonReader *r) {
    size_t slots = r->key_slots ? 2 * r->key_slots : JV_KEY_SLOTS_MIN;
    KeySlot *grown = PyMem_Calloc(slots, sizeof(KeySlot));
    if (grown == NULL) return;
    for (size_t k = 0; k < r->key_slots; k++) {
        if (r->keys[k].key == NULL) continue;
        size_t slot = (size_t)r->keys[k].hash & (slots - 1);
        while (grown[slot].key != NULL) slot = (slot + 1) & (slots - 1);
        grown[slot] = r->keys[k];
    }
    PyMem_Free(r->keys);
    r->keys = grown;
    r->key_slots = slots;
}

/* A key: the column's earlier equal key when there is one, else a new string (kept for later). */
static PyObject *jv_key(JsonReader *r, int kind, const void *data, Py_ssize_t len) {
    if (len > JV_KEY_MAX_LEN) return PyUnicode_FromKindAndData(kind, data, len);
    if (2 * r->keys_used >= r->key_slots && r->key_slots < JV_KEY_SLOTS_MAX) jv_grow_keys(r);
    if (r->keys == NULL) return PyUnicode_FromKindAndData(kind, data, len);
    Py_uhash_t h = 14695981039346656037ULL;  /* FNV-1a over code points, whatever the width */
    for (Py_ssize_t k = 0; k < len; k++) h = (h ^ PyUnicode_READ(kind, data, k)) * 1099511628211ULL;
    size_t mask = r->key_slots - 1, slot = (size_t)h & mask;
    while (r->keys[slot].key != NULL) {
        if (r->keys[slot].hash == h && jv_same_text(r->keys[slot].key, kind, data, len))
            return Py_NewRef(r->keys[slot].key);
        slot = (slot + 1) & mask;
    }
    PyObject *key = PyUnicode_FromKindAndData(kind, data, len);
    if (key != NULL && 2 * r->keys_used < r->key_slots) {  /* at most half full: probes stay short */
        r->keys[slot].key = Py_NewRef(key);
        r->keys[slot].hash = h;
        r->keys_used++;
    }
    return key;
}

static int jv_hex4(JsonReader *r, Py_ssize_t at, Py_UCS4 *out) {
    Py_UCS4 cp = 0;
    if (at + 4 > r->n) return 0;
    for (Py_ssize_t k = at; k < at + 4; k++) {
        Py_UCS4 c = JV_READ(r, k);
        int h;
        if (c >= '0' && c <= '9') h = (int)(c - '0');
        else if (c >= 'a' && c <= 'f') h = (int)(c - 'a' + 10);
        else if (c >= 'A' && c <= 'F') h = (int)(c - 'A' + 10);
        else return 0;
        cp = cp * 16 + (Py_UCS4)h;
    }
    *out = cp;
    return 1;
}

/* Index of the first '"', '\\', control character (or, with raw_surrogates, surrogate) at or after i. */
#define JV_PLAIN_SCAN(T, check_surrogates) do {                                   \
        const T *s = (const T *)r->data;                                             \
        while (i < n) {                                                              \
            T c = s[i];                                                              \
            if (c == '"' || c == '\\' || c < 0x20) break;                            \
            if ((check_surrogates) && JV_IS_SURROGATE(c)) break;                     \
            i++;                                                                     \
        }                                                                            \
    } while (0)

/* A string; r->i is just after the opening quote. */
static PyObject *jv_string(JsonReader *r, int is_key) {
    Py_ssize_t start = r->i, i = start, n = r->n;
    switch (r->kind) {
    case PyUnicode_1BYTE_KIND: JV_PLAIN_SCAN(Py_UCS1, 0); break;
    case PyUnicode_2BYTE_KIND: JV_PLAIN_SCAN(Py_UCS2, r->raw_surrogates); break;
    default: JV_PLAIN_SCAN(Py_UCS4, r->raw_surrogates); break;
    }
    if (i >= n) return NULL;
    Py_UCS4 c = JV_READ(r, i);
    if (c == '"') {  /* no escapes: a slice of the text */
        r->i = i + 1;
        if (is_key)
            return jv_key(r, r->kind, (const char *)r->data + start * r->kind, i - start);
        return PyUnicode_Substring(r->text, start, i);
    }
    if (c != '\\') return NULL;  /* a raw control character or surrogate */
    Py_ssize_t len = 0;
    if (r->buf_cap < n - start) {  /* escapes only shorten: the rest of the text is enough */
        Py_UCS4 *grown = PyMem_Realloc(r->buf, (size_t)(n - start) * sizeof(Py_UCS4));
        if (grown == NULL) return PyErr_NoMemory();
        r->buf = grown;
        r->buf_cap = n - start;
    }
    for (Py_ssize_t k = start; k < i; k++) r->buf[len++] = JV_READ(r, k);
    for (;;) {
        if (i >= n) return NULL;
        c = JV_READ(r, i);
        if (c == '"') { i++; break; }
        if (c < 0x20 || (r->raw_surrogates && JV_IS_SURROGATE(c))) return NULL;
        if (c != '\\') { r->buf[len++] = c; i++; continue; }
        if (i + 1 >= n) return NULL;
        c = JV_READ(r, i + 1);
        i += 2;
        switch (c) {
        case '"': case '\\': case '/': break;
        case 'b': c = '\b'; break;
        case 'f': c = '\f'; break;
        case 'n': c = '\n'; break;
        case 'r': c = '\r'; break;
        case 't': c = '\t'; break;
        case 'u': {
            Py_UCS4 low;
            if (!jv_hex4(r, i, &c)) return NULL;
            i += 4;
            if (c >= 0xD800 && c <= 0xDBFF && i + 6 <= n && JV_READ(r, i) == '\\' && JV_READ(r, i + 1) == 'u'
                && jv_hex4(r, i + 2, &low) && low >= 0xDC00 && low <= 0xDFFF) {
                c = 0x10000 + ((c - 0xD800) << 10) + (low - 0xDC00);
                i += 6;
            } else if (JV_IS_SURROGATE(c)) {
                return NULL;  /* a lone surrogate: the exact path says where */
            }
            break;
        }
        default:
            return NULL;
        }
        r->buf[len++] = c;
    }
    r->i = i;
    if (is_key) return jv_key(r, PyUnicode_4BYTE_KIND, r->buf, len);
    return PyUnicode_FromKindAndData(PyUnicode_4BYTE_KIND, r->buf, len);
}

#define JV_IS_DIGIT(c) ((c) >= '0' && (c) <= '9')

/* A number, with json's grammar: -?(0|[1-9][0-9]*)(\.[0-9]+)?([eE][-+]?[0-9]+)? */
static PyObject *jv_number(JsonReader *r) {
    Py_ssize_t start = r->i, i = r->i, n = r->n;
    int is_float = 0;
    if (JV_READ(r, i) == '-') i++;
    if (i >= n) return NULL;
    Py_UCS4 c = JV_READ(r, i);
    if (c == '0') {
        i++;
    } else if (c >= '1' && c <= '9') {
        i++;
        while (i < n && JV_IS_DIGIT(JV_READ(r, i))) i++;
    } else {
        return NULL;
    }
    if (i + 1 < n && JV_READ(r, i) == '.' && JV_IS_DIGIT(JV_READ(r, i + 1))) {
        is_float = 1;
        i += 2;
        while (i < n && JV_IS_DIGIT(JV_READ(r, i))) i++;
    }
    if (i < n && (JV_READ(r, i) == 'e' || JV_READ(r, i) == 'E')) {
        Py_ssize_t j = i + 1;
        if (j < n && (JV_READ(r, j) == '+' || JV_READ(r, j) == '-')) j++;
        if (j < n && JV_IS_DIGIT(JV_READ(r, j))) {  /* else the 'e' is left, and refused by the caller */
            is_float = 1;
            while (j < n && JV_IS_DIGIT(JV_READ(r, j))) j++;
            i = j;
        }
    }
    r->i = i;
    Py_ssize_t len = i - start;
    if (!is_float && len <= 18) {  /* fits a long long */
        int negative = JV_READ(r, start) == '-';
        long long v = 0;
        for (Py_ssize_t k = start + negative; k < i; k++) v = v * 10 + (long long)(JV_READ(r, k) - '0');
        return PyLong_FromLongLong(negative ? -v : v);
    }
    char small[64], *digits = len < (Py_ssize_t)sizeof(small) ? small : PyMem_Malloc((size_t)len + 1);
    if (digits == NULL) return PyErr_NoMemory();
    for (Py_ssize_t k = 0; k < len; k++) digits[k] = (char)JV_READ(r, start + k);
    digits[len] = '\0';
    PyObject *value;
    if (is_float) {
        char *end;
        double d = PyOS_string_to_double(digits, &end, NULL);  /* as float() reads it */
        value = (d == -1.0 && PyErr_Occurred()) || end != digits + len ? NULL : PyFloat_FromDouble(d);
    } else {
        value = PyLong_FromString(digits, NULL, 10);  /* as int() reads it, digit limit included */
    }
    if (digits != small) PyMem_Free(digits);
    return value;
}

static int jv_word(JsonReader *r, const char *word, Py_ssize_t len) {
    if (r->i + len > r->n) return 0;
    for (Py_ssize_t k = 0; k < len; k++)
        if (JV_READ(r, r->i + k) != (Py_UCS4)(unsigned char)word[k]) return 0;
    r->i += len;
    return 1;
}

static PyObject *jv_array(JsonReader *r) {
    Py_ssize_t base = r->stack_len;
    r->i++;
    jv_skip_space(r);
    if (r->i < r->n && JV_READ(r, r->i) == ']') {
        r->i++;
        return PyList_New(0);
    }
    for (;;) {
        PyObject *item = jv_value(r);
        if (item == NULL) goto fail;
        if (r->stack_len == r->stack_cap) {
            Py_ssize_t cap = r->stack_cap ? 2 * r->stack_cap : 256;
            PyObject **grown = PyMem_Realloc(r->stack, (size_t)cap * sizeof(PyObject *));
            if (grown == NULL) { Py_DECREF(item); PyErr_NoMemory(); goto fail; }
            r->stack = grown;
            r->stack_cap = cap;
        }
        r->stack[r->stack_len++] = item;
        jv_skip_space(r);
        if (r->i >= r->n) goto fail;
        Py_UCS4 c = JV_READ(r, r->i++);
        if (c == ']') break;
        if (c != ',') goto fail;
        jv_skip_space(r);
    }
    PyObject *list = PyList_New(r->stack_len - base);
    if (list == NULL) goto fail;
    for (Py_ssize_t k = base; k < r->stack_len; k++) PyList_SET_ITEM(list, k - base, r->stack[k]);
    r->stack_len = base;
    return list;
fail:
    while (r->stack_len > base) Py_DECREF(r->stack[--r->stack_len]);
    return NULL;
}

static PyObject *jv_object(JsonReader *r) {
    PyObject *dict = PyDict_New(), *key = NULL, *value = NULL;
    if (dict == NULL) return NULL;
    r->i++;
    jv_skip_space(r);
    if (r->i < r->n && JV_READ(r, r->i) == '}') {
        r->i++;
        return dict;
    }
    for (;;) {
        if (r->i >= r->n || JV_READ(r, r->i) != '"') goto fail;
        r->i++;
        key = jv_string(r, 1);
        if (key == NULL) goto fail;
        jv_skip_space(r);
        if (r->i >= r->n || JV_READ(r, r->i) != ':') goto fail;
        r->i++;
        jv_skip_space(r);
        value = jv_value(r);
        if (value == NULL || PyDict_SetItem(dict, key, value) < 0) goto fail;
        Py_CLEAR(key);
        Py_CLEAR(value);
        jv_skip_space(r);
        if (r->i >= r->n) goto fail;
        Py_UCS4 c = JV_READ(r, r->i++);
        if (c == '}') break;
        if (c != ',') goto fail;
        jv_skip_space(r);
    }
    return dict;
fail:
    Py_XDECREF(key);
    Py_XDECREF(value);
    Py_DECREF(dict);
    return NULL;
}

static PyObject *jv_value(JsonReader *r) {
    if (r->i >= r->n) return NULL;
    switch (JV_READ(r, r->i)) {
    case '"':
        r->i++;
        return jv_string(r, 0);
    case '[': case '{': {
        if (r->depth >= r->max_depth) return NULL;
        r->depth++;
        PyObject *v = JV_READ(r, r->i) == '[' ? jv_array(r) : jv_object(r);
        r->depth--;
        return v;
    }
    case 'n': if (jv_word(r, "null", 4)) Py_RETURN_NONE; return NULL;
    case 't': if (jv_word(r, "true", 4)) Py_RETURN_TRUE; return NULL;
    case 'f': if (jv_word(r, "false", 5)) Py_RETURN_FALSE; return NULL;
    case '-': case '0': case '1': case '2': case '3': case '4': case '5': case '6': case '7': case '8': case '9':
        return jv_number(r);
    default:  /* NaN, Infinity and anything that is not JSON */
        return NULL;
    }
}

static PyObject *json_values(PyObject *self, PyObject *args) {
    PyObject *texts, *left;
    Py_ssize_t max_depth, max_chars;
    int raw_surrogates;
    if (!PyArg_ParseTuple(args, "OnnpO:json_values", &texts, &max_depth, &max_chars, &raw_surrogates, &left))
        return NULL;
    PyObject *seq = PySequence_Fast(texts, "expected a sequence of str");
    if (seq == NULL) return NULL;
    Py_ssize_t count = PySequence_Fast_GET_SIZE(seq);
    PyObject **items = PySequence_Fast_ITEMS(seq);
    PyObject *values = PyList_New(count), *rows = PyList_New(0), *result = NULL;
    JsonReader r;
    memset(&r, 0, sizeof r);
    r.max_depth = max_depth < JV_MAX_DEPTH ? (int)max_depth : JV_MAX_DEPTH;
    r.raw_surrogates = raw_surrogates;
    if (values == NULL || rows == NULL) goto done;
    for (Py_ssize_t k = 0; k < count; k++) {
        PyObject *text = items[k], *value = NULL;
        if (!PyUnicode_Check(text)) {
            PyErr_Format(PyExc_TypeError, "expected str, got %.80s", Py_TYPE(text)->tp_name);
            goto done;
        }
#if PY_VERSION_HEX < 0x030C0000
        if (PyUnicode_READY(text) < 0) goto done;
#endif
        r.text = text;
        r.kind = PyUnicode_KIND(text);
        r.data = PyUnicode_DATA(text);
        r.n = PyUnicode_GET_LENGTH(text);
        r.i = 0;
        r.depth = 0;
        if (r.n <= max_chars) {
            jv_skip_space(&r);
            value = jv_value(&r);
            jv_skip_space(&r);
            if (value != NULL && r.i != r.n) Py_CLEAR(value);  /* more after the value */
        }
        if (value == NULL) {
            PyErr_Clear();  /* the exact path meets the same error and reports it */
            PyObject *row = PyLong_FromSsize_t(k);
            if (row == NULL || PyList_Append(rows, row) < 0) { Py_XDECREF(row); goto done; }
            Py_DECREF(row);
            value = Py_NewRef(left);
        }
        PyList_SET_ITEM(values, k, value);
    }
    result = PyTuple_Pack(2, values, rows);
done:
    for (size_t k = 0; k < r.key_slots; k++) Py_XDECREF(r.keys[k].key);
    PyMem_Free(r.keys);
    PyMem_Free(r.buf);
    PyMem_Free(r.stack);
    Py_XDECREF(values);
    Py_XDECREF(rows);
    Py_DECREF(seq);
    return result;
}

static PyMethodDef methods[] = {
    {"py_to_json", py_to_json, METH_O, "JSON text for a Python literal in the shared subset, else None."},
    {"many_py_to_json", many_py_to_json, METH_O, "py_to_json over a sequence; returns a list."},
    {"json_values", json_values, METH_VARARGS,
     "json_values(texts, max_depth, max_chars, raw_surrogates, left) -> (values, rows left to the exact path)."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef module = {PyModuleDef_HEAD_INIT, "_pyliteral", NULL, -1, methods};

PyMODINIT_FUNC PyInit__pyliteral(void) { return PyModule_Create(&module); }
