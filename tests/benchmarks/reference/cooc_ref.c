/* cooc_ref.c - single-core C reference for windowed co-occurrence counting.
 *
 * Counting rule (shared by every counter in this folder):
 *   - vocabulary = the V most frequent token ids of the (possibly truncated)
 *     corpus, ranked by count descending, ties by id ascending; rank 0 is the
 *     most frequent.  Tokens outside it are skipped but keep their position.
 *   - every pair of positions i < j with j - i <= W inside one document, both
 *     tokens in the vocabulary, is one "pair".  It adds 1 to the unordered cell
 *     (min(ra, rb), max(ra, rb)) in rank space.  The symmetric matrix a PPMI
 *     step wants is M[a][b] = M[b][a] = u[a][b] for a != b, M[a][a] = 2 u[a][a],
 *     so sum(M) = 2 * pairs.
 *
 * Two counting back-ends:
 *   --mode sort : write every pair as a uint32 key a*V+b (V <= 65535 so it
 *                 fits), LSD radix sort (3 passes 11/11/10 bits), run-length
 *                 encode.  Memory ~ 8 bytes per pair.
 *   --mode hash : open-addressing hash table (linear probing, key+count as
 *                 two uint32), grown at load 0.5.  Memory ~ 16-32 bytes per
 *                 distinct cell.
 *
 * Input: the .npy files written by gen_zipf_corpus.py (tokens uint32, doc starts
 * int64).  Optional --out FILE writes the cells sorted by key as pairs of
 * little-endian uint32 (key, count), preceded by a header line; --vocab-out
 * FILE writes the vocabulary ids (uint32, rank order).
 *
 * Build: cc -O3 -march=native -o cooc_ref cooc_ref.c  (bench_counting.py does it into its cache folder)
 */
#define _GNU_SOURCE
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <time.h>
#include <sys/resource.h>
#include <sys/mman.h>

/* large buffers: anonymous mmap with transparent huge pages requested
   (fewer page faults and TLB misses in the radix scatter) */
static void *big_alloc(size_t bytes) {
    if (bytes == 0) bytes = 1;
    void *p = mmap(NULL, bytes, PROT_READ | PROT_WRITE, MAP_PRIVATE | MAP_ANONYMOUS, -1, 0);
    if (p == MAP_FAILED) return NULL;
#ifdef MADV_HUGEPAGE
    madvise(p, bytes, MADV_HUGEPAGE);
#endif
    return p;
}

static double now(void) {
    struct timespec ts;
    clock_gettime(CLOCK_MONOTONIC, &ts);
    return ts.tv_sec + ts.tv_nsec * 1e-9;
}

static void die(const char *m) { fprintf(stderr, "cooc: %s\n", m); exit(2); }

/* minimal .npy reader: little-endian, C order, 1-d */
static void *load_npy(const char *path, const char *descr, size_t itemsize,
                      size_t *n_out) {
    FILE *f = fopen(path, "rb");
    if (!f) die("cannot open input");
    unsigned char magic[10];
    if (fread(magic, 1, 10, f) != 10 || memcmp(magic, "\x93NUMPY", 6)) die("not npy");
    size_t hlen;
    if (magic[6] == 1) hlen = magic[8] | (magic[9] << 8);
    else {
        unsigned char b[2];
        if (fread(b, 1, 2, f) != 2) die("bad npy");
        hlen = magic[8] | (magic[9] << 8) | (b[0] << 16) | ((size_t)b[1] << 24);
    }
    char *hdr = malloc(hlen + 1);
    if (fread(hdr, 1, hlen, f) != hlen) die("bad npy header");
    hdr[hlen] = 0;
    if (!strstr(hdr, descr)) die("unexpected dtype");
    if (strstr(hdr, "'fortran_order': True")) die("fortran order");
    char *sh = strstr(hdr, "'shape': (");
    if (!sh) die("no shape");
    size_t n = strtoull(sh + 10, NULL, 10);
    free(hdr);
    void *data = malloc(n * itemsize + 64);
    if (!data) die("out of memory");
    if (fread(data, itemsize, n, f) != n) die("short npy");
    fclose(f);
    *n_out = n;
    return data;
}

/* ---------- vocabulary ---------- */
static uint32_t *g_cnt;
static int cmp_rank(const void *x, const void *y) {
    uint32_t a = *(const uint32_t *)x, b = *(const uint32_t *)y;
    if (g_cnt[a] != g_cnt[b]) return g_cnt[a] > g_cnt[b] ? -1 : 1;
    return a < b ? -1 : (a > b);
}

/* ---------- radix sort ---------- */
static void radix_sort_u32(uint32_t *a, uint32_t *tmp, size_t n) {
    static const int shifts[3] = {0, 11, 22};
    static const uint32_t masks[3] = {0x7FF, 0x7FF, 0x3FF};
    size_t hist[3][2048];
    memset(hist, 0, sizeof hist);
    for (size_t i = 0; i < n; i++) {           /* all three histograms at once */
        uint32_t k = a[i];
        hist[0][k & 0x7FF]++;
        hist[1][(k >> 11) & 0x7FF]++;
        hist[2][k >> 22]++;
    }
    uint32_t *src = a, *dst = tmp;
    for (int p = 0; p < 3; p++) {
        size_t sum = 0;
        for (int b = 0; b < 2048; b++) { size_t c = hist[p][b]; hist[p][b] = sum; sum += c; }
        int sft = shifts[p];
        uint32_t m = masks[p];
        for (size_t i = 0; i < n; i++) {
            uint32_t k = src[i];
            dst[hist[p][(k >> sft) & m]++] = k;
        }
        uint32_t *t = src; src = dst; dst = t;
    }
    if (src != a) memcpy(a, src, n * sizeof *a);   /* odd pass count: result in tmp */
}

/* ---------- hash table ---------- */
#define EMPTY 0xFFFFFFFFu
typedef struct { uint32_t k, v; } slot_t;      /* key and count share a cache line */
typedef struct { slot_t *s; size_t cap, used; int bits; } table_t;

static inline size_t hslot(uint32_t k, int bits) {
    return (size_t)(((uint64_t)k * 0x9E3779B97F4A7C15ull) >> (64 - bits));
}
static void tab_init(table_t *t, int bits) {
    t->bits = bits; t->cap = (size_t)1 << bits; t->used = 0;
    t->s = big_alloc(t->cap * sizeof(slot_t));
    if (!t->s) die("out of memory");
    memset(t->s, 0xFF, t->cap * sizeof(slot_t));
}
static void tab_grow(table_t *t) {
    table_t n; tab_init(&n, t->bits + 1);
    size_t mask = n.cap - 1;
    for (size_t i = 0; i < t->cap; i++) {
        uint32_t k = t->s[i].k;
        if (k == EMPTY) continue;
        size_t p = hslot(k, n.bits);
        while (n.s[p].k != EMPTY) p = (p + 1) & mask;
        n.s[p] = t->s[i];
    }
    n.used = t->used;
    munmap(t->s, t->cap * sizeof(slot_t));
    *t = n;
}
static inline void tab_add(table_t *t, uint32_t k) {
    size_t mask = t->cap - 1, p = hslot(k, t->bits);
    for (;;) {
        uint32_t kk = t->s[p].k;
        if (kk == k) { t->s[p].v++; return; }
        if (kk == EMPTY) break;
        p = (p + 1) & mask;
    }
    t->s[p].k = k; t->s[p].v = 1;
    if (++t->used * 2 > t->cap) tab_grow(t);
}

static long peak_rss_kb(void) {
    struct rusage ru; getrusage(RUSAGE_SELF, &ru); return ru.ru_maxrss;
}

int main(int argc, char **argv) {
    const char *tok_path = NULL, *off_path = NULL, *out = NULL, *vout = NULL;
    const char *mode = "sort";
    long V = 50000, W = 5, max_tokens = -1;
    for (int i = 1; i < argc; i++) {
        if (!strcmp(argv[i], "--vocab") && i + 1 < argc) V = atol(argv[++i]);
        else if (!strcmp(argv[i], "--window") && i + 1 < argc) W = atol(argv[++i]);
        else if (!strcmp(argv[i], "--max-tokens") && i + 1 < argc) max_tokens = atol(argv[++i]);
        else if (!strcmp(argv[i], "--mode") && i + 1 < argc) mode = argv[++i];
        else if (!strcmp(argv[i], "--out") && i + 1 < argc) out = argv[++i];
        else if (!strcmp(argv[i], "--vocab-out") && i + 1 < argc) vout = argv[++i];
        else if (!tok_path) tok_path = argv[i];
        else if (!off_path) off_path = argv[i];
        else die("usage: cooc TOKENS.npy OFFSETS.npy [--vocab V] [--window W] "
                 "[--max-tokens N] [--mode sort|hash|rows] [--out F] [--vocab-out F]");
    }
    if (!tok_path || !off_path) die("need TOKENS.npy and OFFSETS.npy");
    if (V < 1 || V > 65535) die("--vocab must be 1..65535 (uint32 keys)");
    int md = !strcmp(mode, "sort") ? 0 : !strcmp(mode, "hash") ? 1 : !strcmp(mode, "rows") ? 2 : -1;
    if (md < 0) die("--mode sort|hash|rows");

    double t0 = now();
    size_t N, ndocs;
    uint32_t *tok = load_npy(tok_path, "<u4", 4, &N);
    int64_t *off = load_npy(off_path, "<i8", 8, &ndocs);
    if (max_tokens >= 0 && (size_t)max_tokens < N) {
        N = (size_t)max_tokens;
        size_t d = 0;
        while (d < ndocs && (size_t)off[d] < N) d++;
        ndocs = d;
    }
    double t1 = now();

    /* vocabulary: top V ids by count */
    uint32_t maxid = 0;
    for (size_t i = 0; i < N; i++) if (tok[i] > maxid) maxid = tok[i];
    size_t nid = (size_t)maxid + 1;
    g_cnt = calloc(nid, 4);
    for (size_t i = 0; i < N; i++) g_cnt[tok[i]]++;
    uint32_t *order = malloc(nid * 4);
    for (size_t i = 0; i < nid; i++) order[i] = (uint32_t)i;
    qsort(order, nid, 4, cmp_rank);
    if ((size_t)V > nid) V = (long)nid;
    int32_t *rank_of = malloc(nid * 4);
    for (size_t i = 0; i < nid; i++) rank_of[i] = -1;
    for (long r = 0; r < V; r++) rank_of[order[r]] = (int32_t)r;
    /* token ids -> ranks (-1 = skipped), in place, reusing the token buffer */
    int32_t *rk = (int32_t *)tok;
    size_t in_vocab = 0;
    for (size_t i = 0; i < N; i++) { rk[i] = rank_of[tok[i]]; in_vocab += rk[i] >= 0; }
    double t2 = now();

    uint64_t pairs = 0, cells = 0;
    uint32_t *keys = NULL, *cnts = NULL;       /* final sorted cells */
    const uint32_t VV = (uint32_t)V;
    if (md == 0) {
        /* upper bound on pairs: every in-vocab token pairs with <= W followers */
        size_t cap = in_vocab * (size_t)W + 1;
        uint32_t *buf = big_alloc(cap * 4);
        if (!buf) die("out of memory");
        size_t n = 0;
        for (size_t d = 0; d < ndocs; d++) {
            size_t a = (size_t)off[d], b = d + 1 < ndocs ? (size_t)off[d + 1] : N;
            for (size_t i = a; i < b; i++) {
                int32_t x = rk[i];
                if (x < 0) continue;
                size_t e = i + W < b - 1 ? i + W : b - 1;
                for (size_t j = i + 1; j <= e; j++) {
                    /* branch-free: always store, advance only for in-vocab y */
                    int32_t y = rk[j];
                    uint32_t lo = (uint32_t)(x < y ? x : y), hi = (uint32_t)(x < y ? y : x);
                    buf[n] = lo * VV + hi;
                    n += (y >= 0);
                }
            }
        }
        pairs = n;
        double tg = now();
        uint32_t *tmp = big_alloc((n + 1) * 4);
        if (!tmp) die("out of memory");
        radix_sort_u32(buf, tmp, n);
        double ts = now();
        /* run-length encode in place: keys -> buf, counts -> tmp */
        size_t m = 0;
        for (size_t i = 0; i < n;) {
            size_t j = i + 1;
            while (j < n && buf[j] == buf[i]) j++;
            buf[m] = buf[i]; tmp[m] = (uint32_t)(j - i); m++;
            i = j;
        }
        cells = m; keys = buf; cnts = tmp;
        fprintf(stderr, "  sort phases: gen %.3fs radix %.3fs rle %.3fs\n",
                tg - t2, ts - tg, now() - ts);
    } else if (md == 1) {
        table_t t; tab_init(&t, 20);
        for (size_t d = 0; d < ndocs; d++) {
            size_t a = (size_t)off[d], b = d + 1 < ndocs ? (size_t)off[d + 1] : N;
            for (size_t i = a; i < b; i++) {
                int32_t x = rk[i];
                if (x < 0) continue;
                size_t e = i + W < b - 1 ? i + W : b - 1;
                for (size_t j = i + 1; j <= e; j++) {
                    int32_t y = rk[j];
                    if (y < 0) continue;
                    tab_add(&t, x < y ? (uint32_t)x * VV + (uint32_t)y
                                      : (uint32_t)y * VV + (uint32_t)x);
                    pairs++;
                }
            }
        }
        double th = now();
        /* compact + sort by key so the output equals the sort mode's */
        size_t m = 0;
        uint64_t *pk = malloc(t.used * 8 + 8);
        for (size_t i = 0; i < t.cap; i++)
            if (t.s[i].k != EMPTY) pk[m++] = ((uint64_t)t.s[i].k << 32) | t.s[i].v;
        cells = m;
        munmap(t.s, t.cap * sizeof(slot_t));
        /* LSD radix on the upper 32 bits, 4 x 8-bit passes */
        uint64_t *tmp = malloc(m * 8 + 8);
        uint64_t *src = pk, *dst = tmp;
        for (int p = 0; p < 4; p++) {
            size_t h[256] = {0};
            int sft = 32 + 8 * p;
            for (size_t i = 0; i < m; i++) h[(src[i] >> sft) & 0xFF]++;
            size_t s = 0;
            for (int b2 = 0; b2 < 256; b2++) { size_t c = h[b2]; h[b2] = s; s += c; }
            for (size_t i = 0; i < m; i++) dst[h[(src[i] >> sft) & 0xFF]++] = src[i];
            uint64_t *x = src; src = dst; dst = x;
        }
        keys = malloc(m * 4 + 4); cnts = malloc(m * 4 + 4);
        for (size_t i = 0; i < m; i++) { keys[i] = (uint32_t)(src[i] >> 32); cnts[i] = (uint32_t)src[i]; }
        free(pk); free(tmp);
        fprintf(stderr, "  hash phases: count %.3fs (table %zu slots) extract+sort %.3fs\n",
                th - t2, (size_t)1 << (t.bits), now() - th);
    } else {
        /* rows: pass 1 counts pairs per row (lo), pass 2 scatters the column
           (hi, uint16) into its row's bucket, pass 3 reduces each row in cache:
           long rows by a dense V-wide accumulator + scan, short rows by a
           16-bit radix/insertion sort + run-length.  ~2 bytes per pair. */
        size_t *rs = calloc((size_t)V + 1, sizeof(size_t));
        size_t *pos = malloc(((size_t)V + 1) * sizeof(size_t));
        for (size_t d = 0; d < ndocs; d++) {
            size_t a = (size_t)off[d], b = d + 1 < ndocs ? (size_t)off[d + 1] : N;
            for (size_t i = a; i < b; i++) {
                int32_t x = rk[i];
                if (x < 0) continue;
                size_t e = i + W < b - 1 ? i + W : b - 1;
                for (size_t j = i + 1; j <= e; j++) {
                    int32_t y = rk[j];
                    int32_t lo = (y >= 0 && y < x) ? y : x;
                    rs[lo] += (y >= 0);
                }
            }
        }
        size_t s = 0;
        for (long r = 0; r < V; r++) { size_t c = rs[r]; rs[r] = s; pos[r] = s; s += c; }
        rs[V] = s;
        pairs = s;
        uint16_t *col = big_alloc(s * 2 + 64);
        if (!col) die("out of memory");
        for (size_t d = 0; d < ndocs; d++) {
            size_t a = (size_t)off[d], b = d + 1 < ndocs ? (size_t)off[d + 1] : N;
            for (size_t i = a; i < b; i++) {
                int32_t x = rk[i];
                if (x < 0) continue;
                size_t e = i + W < b - 1 ? i + W : b - 1;
                for (size_t j = i + 1; j <= e; j++) {
                    int32_t y = rk[j];
                    if (y < 0) continue;
                    if (y < x) col[pos[y]++] = (uint16_t)x;
                    else col[pos[x]++] = (uint16_t)y;
                }
            }
        }
        double tsc = now();
        size_t ocap = s / 3 + 1024, m = 0;
        keys = malloc(ocap * 4); cnts = malloc(ocap * 4);
        uint32_t *dense = calloc((size_t)V, 4);
        uint16_t *tmp16 = malloc((size_t)V * 2 + 64);
        for (long r = 0; r < V; r++) {
            uint16_t *c = col + rs[r];
            size_t n = rs[r + 1] - rs[r];
            if (!n) continue;
            if (m + (n < (size_t)V ? n : (size_t)V) > ocap) {
                ocap = ocap * 2 + (size_t)V;
                keys = realloc(keys, ocap * 4); cnts = realloc(cnts, ocap * 4);
                if (!keys || !cnts) die("out of memory");
            }
            uint32_t base = (uint32_t)r * VV;
            if (n >= (size_t)V) {                       /* long row: dense */
                for (size_t i = 0; i < n; i++) dense[c[i]]++;
                for (long k = r; k < V; k++)
                    if (dense[k]) { keys[m] = base + (uint32_t)k; cnts[m] = dense[k]; m++; dense[k] = 0; }
                continue;
            }
            if (n <= 32) {                              /* insertion sort */
                for (size_t i = 1; i < n; i++) {
                    uint16_t v = c[i]; size_t j = i;
                    while (j && c[j - 1] > v) { c[j] = c[j - 1]; j--; }
                    c[j] = v;
                }
            } else {                                    /* 2 x 8-bit LSD radix */
                size_t h0[256] = {0}, h1[256] = {0};
                for (size_t i = 0; i < n; i++) { h0[c[i] & 0xFF]++; h1[c[i] >> 8]++; }
                size_t a0 = 0, a1 = 0;
                for (int k = 0; k < 256; k++) {
                    size_t x0 = h0[k], x1 = h1[k]; h0[k] = a0; h1[k] = a1; a0 += x0; a1 += x1;
                }
                for (size_t i = 0; i < n; i++) tmp16[h0[c[i] & 0xFF]++] = c[i];
                for (size_t i = 0; i < n; i++) c[h1[tmp16[i] >> 8]++] = tmp16[i];
            }
            for (size_t i = 0; i < n;) {
                size_t j = i + 1;
                while (j < n && c[j] == c[i]) j++;
                keys[m] = base + c[i]; cnts[m] = (uint32_t)(j - i); m++;
                i = j;
            }
        }
        cells = m;
        fprintf(stderr, "  rows phases: hist+scatter %.3fs reduce %.3fs\n", tsc - t2, now() - tsc);
    }
    double t3 = now();

    /* checksum independent of layout: sum over cells of count * (key % 1000003 + 1) */
    uint64_t total = 0, chk = 0, diag = 0;
    for (size_t i = 0; i < cells; i++) {
        total += cnts[i];
        chk += (uint64_t)cnts[i] * (keys[i] % 1000003u + 1);
        if (keys[i] / VV == keys[i] % VV) diag += cnts[i];
    }
    if (out) {
        FILE *f = fopen(out, "wb");
        if (!f) die("cannot write --out");
        char hdr[128];
        int hl = snprintf(hdr, sizeof hdr, "COOC1 V=%ld W=%ld N=%zu cells=%llu\n",
                          V, W, N, (unsigned long long)cells);
        fwrite(hdr, 1, (size_t)hl, f);
        for (size_t i = 0; i < cells; i++) { fwrite(&keys[i], 4, 1, f); fwrite(&cnts[i], 4, 1, f); }
        fclose(f);
    }
    if (vout) {
        FILE *f = fopen(vout, "wb");
        if (!f) die("cannot write --vocab-out");
        fwrite(order, 4, (size_t)V, f);
        fclose(f);
    }
    double t4 = now();
    double tc = t3 - t2;
    printf("{\"impl\": \"c-%s\", \"tokens\": %zu, \"docs\": %zu, \"vocab\": %ld, "
           "\"window\": %ld, \"in_vocab_tokens\": %zu, \"pairs\": %llu, "
           "\"cells\": %llu, \"total\": %llu, \"diag\": %llu, \"checksum\": %llu, "
           "\"t_load\": %.3f, \"t_vocab\": %.3f, \"t_count\": %.3f, \"t_write\": %.3f, "
           "\"tokens_per_s_count\": %.0f, \"pairs_per_s_count\": %.0f, "
           "\"tokens_per_s_total\": %.0f, \"peak_rss_mb\": %.1f}\n",
           mode, N, ndocs, V, W, in_vocab, (unsigned long long)pairs,
           (unsigned long long)cells, (unsigned long long)total,
           (unsigned long long)diag, (unsigned long long)chk,
           t1 - t0, t2 - t1, tc, t4 - t3, N / tc, pairs / tc, N / (t3 - t0),
           peak_rss_kb() / 1024.0);
    return 0;
}
