/* Copied from the team tools in ../shared/mcu/insncount.c (kept here so CI works on a clean clone). */
/*
 * insncount: QEMU TCG plugin that counts guest instructions (and memory accesses)
 * executed between entries into two marker functions.
 *
 *   qemu-system-arm ... -plugin ./libinsncount.so,start=0xADDR,stop=0xADDR -d plugin
 *
 * Every time the instruction at `start` executes, the running counters are snapshotted;
 * every time the instruction at `stop` executes, one line is printed:
 *   insncount: region <i> insns=<n> mem=<m>
 * With `sym=on`, each region is followed by its top functions (by executed instructions):
 *   insncount: region <i>   <n> insns  <symbol>
 * Counting is per instruction (inline add before each instruction), so it is exact even
 * when a translation block is left early. Single vCPU assumed (Cortex-M boards).
 *
 * The few API declarations needed are written out here because Debian's qemu packages
 * ship no qemu-plugin.h. They were validated against Debian 12's QEMU 7.2 (plugin API
 * version 1): loads, and agrees exactly with a -singlestep exec trace. QEMU 9.x reworked
 * inline counters (scoreboards); on newer QEMU build against that QEMU's real header.
 */
#include <inttypes.h>
#include <stdbool.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

/* ---- subset of <qemu-plugin.h>, API version 1 ---- */
typedef uint64_t qemu_plugin_id_t;
typedef struct qemu_info_t qemu_info_t; /* opaque here: not dereferenced */
struct qemu_plugin_tb;
struct qemu_plugin_insn;
enum qemu_plugin_cb_flags { QEMU_PLUGIN_CB_NO_REGS, QEMU_PLUGIN_CB_R_REGS, QEMU_PLUGIN_CB_RW_REGS };
enum qemu_plugin_mem_rw { QEMU_PLUGIN_MEM_R = 1, QEMU_PLUGIN_MEM_W, QEMU_PLUGIN_MEM_RW };
enum qemu_plugin_op { QEMU_PLUGIN_INLINE_ADD_U64 };
typedef void (*qemu_plugin_vcpu_tb_trans_cb_t)(qemu_plugin_id_t id, struct qemu_plugin_tb *tb);
typedef void (*qemu_plugin_vcpu_udata_cb_t)(unsigned int vcpu_index, void *userdata);
typedef void (*qemu_plugin_udata_cb_t)(qemu_plugin_id_t id, void *userdata);
void qemu_plugin_register_vcpu_tb_trans_cb(qemu_plugin_id_t id, qemu_plugin_vcpu_tb_trans_cb_t cb);
size_t qemu_plugin_tb_n_insns(const struct qemu_plugin_tb *tb);
struct qemu_plugin_insn *qemu_plugin_tb_get_insn(const struct qemu_plugin_tb *tb, size_t idx);
uint64_t qemu_plugin_insn_vaddr(const struct qemu_plugin_insn *insn);
const char *qemu_plugin_insn_symbol(const struct qemu_plugin_insn *insn);
void qemu_plugin_register_vcpu_insn_exec_cb(struct qemu_plugin_insn *insn, qemu_plugin_vcpu_udata_cb_t cb,
                                            enum qemu_plugin_cb_flags flags, void *userdata);
void qemu_plugin_register_vcpu_insn_exec_inline(struct qemu_plugin_insn *insn, enum qemu_plugin_op op,
                                                void *ptr, uint64_t imm);
void qemu_plugin_register_vcpu_mem_inline(struct qemu_plugin_insn *insn, enum qemu_plugin_mem_rw rw,
                                          enum qemu_plugin_op op, void *ptr, uint64_t imm);
void qemu_plugin_register_atexit_cb(qemu_plugin_id_t id, qemu_plugin_udata_cb_t cb, void *userdata);
void qemu_plugin_outs(const char *string);
#define QEMU_PLUGIN_EXPORT __attribute__((visibility("default")))
QEMU_PLUGIN_EXPORT int qemu_plugin_version = 1;
/* ---- end of API subset ---- */

static uint64_t n_insn, n_mem;            /* running totals */
static uint64_t snap_insn, snap_mem;      /* values at last start marker */
static uint64_t start_addr = UINT64_MAX, stop_addr = UINT64_MAX;
static bool armed;
static unsigned region;

/* optional per-symbol attribution (sym=on) */
#define MAXSYM 2048
#define TOPSYM 12
static bool opt_sym;
static const char *sym_name[MAXSYM];
static uint64_t sym_cnt[MAXSYM], sym_snap[MAXSYM];
static int nsym;

static int sym_index(const char *name)
{
    if (!name) {
        name = "?";
    }
    for (int i = 0; i < nsym; i++) {
        if (sym_name[i] == name || strcmp(sym_name[i], name) == 0) {
            return i;
        }
    }
    if (nsym == MAXSYM) {
        return MAXSYM - 1; /* overflow bucket */
    }
    sym_name[nsym] = name; /* points into QEMU's ELF symbol table: lives as long as QEMU */
    return nsym++;
}

static void on_start(unsigned int vcpu, void *ud)
{
    (void)vcpu; (void)ud;
    snap_insn = n_insn;
    snap_mem = n_mem;
    if (opt_sym) {
        memcpy(sym_snap, sym_cnt, sizeof sym_cnt);
    }
    armed = true;
}

static void on_stop(unsigned int vcpu, void *ud)
{
    char buf[160];
    (void)vcpu; (void)ud;
    if (!armed) {
        return;
    }
    snprintf(buf, sizeof buf, "insncount: region %u insns=%" PRIu64 " mem=%" PRIu64 "\n",
             region++, n_insn - snap_insn, n_mem - snap_mem);
    qemu_plugin_outs(buf);
    if (opt_sym) {
        /* print the TOPSYM symbols with most instructions in this region (selection sort) */
        static bool used[MAXSYM];
        memset(used, 0, sizeof used);
        for (int k = 0; k < TOPSYM; k++) {
            int best = -1;
            for (int i = 0; i < nsym; i++) {
                uint64_t d = sym_cnt[i] - sym_snap[i];
                if (!used[i] && d && (best < 0 || d > sym_cnt[best] - sym_snap[best])) {
                    best = i;
                }
            }
            if (best < 0) {
                break;
            }
            used[best] = true;
            snprintf(buf, sizeof buf, "insncount: region %u   %10" PRIu64 " insns  %s\n", region - 1,
                     sym_cnt[best] - sym_snap[best], sym_name[best]);
            qemu_plugin_outs(buf);
        }
    }
    armed = false;
}

static void tb_trans(qemu_plugin_id_t id, struct qemu_plugin_tb *tb)
{
    (void)id;
    size_t n = qemu_plugin_tb_n_insns(tb);
    for (size_t i = 0; i < n; i++) {
        struct qemu_plugin_insn *insn = qemu_plugin_tb_get_insn(tb, i);
        uint64_t va = qemu_plugin_insn_vaddr(insn);
        /* marker callbacks are registered before the counter increment, identically for
           start and stop, so any ordering effect cancels in the difference */
        if (va == start_addr) {
            qemu_plugin_register_vcpu_insn_exec_cb(insn, on_start, QEMU_PLUGIN_CB_NO_REGS, NULL);
        }
        if (va == stop_addr) {
            qemu_plugin_register_vcpu_insn_exec_cb(insn, on_stop, QEMU_PLUGIN_CB_NO_REGS, NULL);
        }
        qemu_plugin_register_vcpu_insn_exec_inline(insn, QEMU_PLUGIN_INLINE_ADD_U64, &n_insn, 1);
        qemu_plugin_register_vcpu_mem_inline(insn, QEMU_PLUGIN_MEM_RW, QEMU_PLUGIN_INLINE_ADD_U64, &n_mem, 1);
        if (opt_sym) {
            int k = sym_index(qemu_plugin_insn_symbol(insn));
            qemu_plugin_register_vcpu_insn_exec_inline(insn, QEMU_PLUGIN_INLINE_ADD_U64, &sym_cnt[k], 1);
        }
    }
}

static void at_exit(qemu_plugin_id_t id, void *ud)
{
    char buf[128];
    (void)id; (void)ud;
    snprintf(buf, sizeof buf, "insncount: total insns=%" PRIu64 " mem=%" PRIu64 " regions=%u\n",
             n_insn, n_mem, region);
    qemu_plugin_outs(buf);
}

QEMU_PLUGIN_EXPORT int qemu_plugin_install(qemu_plugin_id_t id, const qemu_info_t *info, int argc, char **argv)
{
    (void)info;
    for (int i = 0; i < argc; i++) {
        const char *a = argv[i];
        if (strncmp(a, "start=", 6) == 0) {
            start_addr = strtoull(a + 6, NULL, 0) & ~1ULL; /* strip Thumb bit */
        } else if (strncmp(a, "stop=", 5) == 0) {
            stop_addr = strtoull(a + 5, NULL, 0) & ~1ULL;
        } else if (strcmp(a, "sym=on") == 0) {
            opt_sym = true;
        } else {
            fprintf(stderr, "insncount: unknown argument '%s'\n", a);
            return -1;
        }
    }
    if (start_addr == UINT64_MAX || stop_addr == UINT64_MAX) {
        fprintf(stderr, "insncount: need start=ADDR,stop=ADDR\n");
        return -1;
    }
    qemu_plugin_register_vcpu_tb_trans_cb(id, tb_trans);
    qemu_plugin_register_atexit_cb(id, at_exit, NULL);
    return 0;
}
