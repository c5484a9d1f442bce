/* registry: the table that maps a rig's `driver:` name to its functions.
 * Not for any driver's work. */
#include "driver.h"

#include <string.h>

extern const drv_ops sim_driver;

static const drv_ops *const drivers[] = {&sim_driver};

const drv_ops *drv_find(const char *name) {
    for (size_t i = 0; name && i < sizeof drivers / sizeof drivers[0]; i++)
        if (strcmp(drivers[i]->name, name) == 0) return drivers[i];
    return NULL;
}
