/* fuzz_plan: libFuzzer entry for the plan reader: any bytes as a plan,
 * then as a rig, then scan expansion of whatever reads. `make fuzz` runs it
 * for a bounded time, seeded from plans/. Not a test of meaning, only that
 * no input crashes, leaks or hangs the reader. */
#include <stddef.h>
#include <stdint.h>

#include "plan.h"
#include "scan.h"

int LLVMFuzzerTestOneInput(const uint8_t *data, size_t size) {
    diag_list d;
    diag_init(&d);
    /* Named inside plans/ so that `rig: rigs/sim-bench.yaml` resolves. */
    plan *p = plan_read_bytes("plans/fuzz.yaml", (const char *)data, size, &d);
    if (p) {
        scan *s = scan_expand(p, &d);
        scan_free(s);
        plan_free(p);
    }
    arena *a = arena_new();
    if (a) {
        plan_node *root = plan_yaml_parse(a, "plans/fuzz-rig.yaml", (const char *)data, size, &d);
        if (root) {
            plan_rig rig = {0};
            rig_read_node(a, root, &rig, &d);
        }
        arena_free(a);
    }
    diag_free(&d);
    return 0;
}
