/* Template of the one-pass Dijkstra of kept_graph.h, included once per instruction set: define
 * SD_DJ_NAME (the function), SD_DJ_LANES (doubles per vector) and SD_DJ_TARGET (its target
 * attribute string) before each #include. No include guard, on purpose.
 *
 * key (n doubles, scratch) holds the tentative distance of a node not done and -inf once it is
 * done (nothing is less than -inf, so a done node is never updated, and it is skipped when the
 * next node is chosen). One pass per node relaxes the row and finds the next node among the
 * updated distances: lane c follows the indices v = c mod LANES and keeps its first least index;
 * the lanes are merged by (value, index), which gives the index one scan finds. Written with
 * GCC/clang vector types. */
#define SD_DJ_CAT2(a, b) a##b
#define SD_DJ_CAT(a, b) SD_DJ_CAT2(a, b)
#define SD_DJ_VD SD_DJ_CAT(SD_DJ_NAME, _vd)
#define SD_DJ_VI SD_DJ_CAT(SD_DJ_NAME, _vi)

typedef double SD_DJ_VD __attribute__((vector_size(8 * SD_DJ_LANES)));
typedef int64_t SD_DJ_VI __attribute__((vector_size(8 * SD_DJ_LANES)));

__attribute__((target(SD_DJ_TARGET))) static void SD_DJ_NAME(const double *restrict W, int64_t n, int64_t s,
                                                             double *restrict dist, int64_t *restrict pred,
                                                             double *restrict key) {
    const double inf = 1.0 / 0.0;
    enum { L = SD_DJ_LANES };
    SD_DJ_VD vinf, vninf;
    SD_DJ_VI step, none, idx0;
    for (int c = 0; c < L; c++) {
        vinf[c] = inf;
        vninf[c] = -inf;
        step[c] = L;
        none[c] = -1;
        idx0[c] = c;
    }
    for (int64_t v = 0; v < n; v++) {
        key[v] = inf;
        pred[v] = -1;
    }
    key[s] = 0.0;
    int64_t u = s; /* the only node below inf */
    for (int64_t it = 0; it < n && u >= 0; it++) {
        double best = key[u];
        dist[u] = best;
        key[u] = -inf;
        const double *row = W + u * n;
        SD_DJ_VD vb;
        SD_DJ_VI vu;
        for (int c = 0; c < L; c++) {
            vb[c] = best;
            vu[c] = u;
        }
        SD_DJ_VD bl = vinf;
        SD_DJ_VI ul = none, idx = idx0;
        int64_t v = 0;
        for (; v + L <= n; v += L) {
            SD_DJ_VD k, r;
            SD_DJ_VI p;
            __builtin_memcpy(&k, key + v, sizeof k);
            __builtin_memcpy(&r, row + v, sizeof r);
            __builtin_memcpy(&p, pred + v, sizeof p);
            SD_DJ_VD nd = vb + r;
            SD_DJ_VI g = nd < k;
            k = (SD_DJ_VD)(((SD_DJ_VI)nd & g) | ((SD_DJ_VI)k & ~g));
            p = (vu & g) | (p & ~g);
            __builtin_memcpy(key + v, &k, sizeof k);
            __builtin_memcpy(pred + v, &p, sizeof p);
            SD_DJ_VI t = (k < bl) & (k > vninf);
            bl = (SD_DJ_VD)(((SD_DJ_VI)k & t) | ((SD_DJ_VI)bl & ~t));
            ul = (idx & t) | (ul & ~t);
            idx += step;
        }
        double nb = inf;
        int64_t nu = -1;
        for (int c = 0; c < L; c++) {
            if (ul[c] >= 0 && (bl[c] < nb || (bl[c] == nb && ul[c] < nu))) {
                nb = bl[c];
                nu = ul[c];
            }
        }
        /* the tail comes after every index above, so only a strictly less value wins */
        for (; v < n; v++) {
            double kv = key[v];
            double nd = best + row[v];
            if (nd < kv) {
                kv = nd;
                key[v] = nd;
                pred[v] = u;
            }
            if (kv < nb && kv > -inf) {
                nb = kv;
                nu = v;
            }
        }
        u = nu;
    }
    /* nodes never done keep their tentative distance (inf: unreachable) */
    for (int64_t v = 0; v < n; v++)
        if (key[v] != -inf) dist[v] = key[v];
}

#undef SD_DJ_VD
#undef SD_DJ_VI
#undef SD_DJ_CAT
#undef SD_DJ_CAT2
#undef SD_DJ_NAME
#undef SD_DJ_LANES
#undef SD_DJ_TARGET
