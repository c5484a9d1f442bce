/* nuclei: the table of nuclei a plan may name (1H, 13C, ...), with their
 * gyromagnetic ratios and spins, and recognition of nucleus tokens.
 * Not for magnetometer species (the rig's detector gives its own ratio)
 * nor for chemical shifts or shielded values: these are bare nuclei. */
#include "expr.h"

#include <string.h>

#define IUPAC_2001 "IUPAC recommendations 2001 (Harris et al., Pure Appl. Chem. 73, 1795)"

/* gamma in rad s^-1 T^-1. The proton's is CODATA 2018's free proton
 * gamma_p (gamma_p / 2 pi = 42.577 478 518 MHz/T); the others are the
 * IUPAC 2001 table's values (value from memory: not read from the paper
 * during this work, but they agree with the project's reference table and
 * with copies of the IUPAC table quoted in public code). 3He, 15N and 23Na
 * were not in the project's reference table: value from memory. */
static const nuc_info NUCLEI[] = {
    {"1H", 2.6752218744e8, 1, "CODATA 2018, free proton gamma_p"},
    {"2H", 4.10662791e7, 2, IUPAC_2001},
    {"3He", -20.3801587e7, 1, IUPAC_2001},   /* value from memory */
    {"7Li", 10.3977013e7, 3, IUPAC_2001},
    {"13C", 6.728284e7, 1, IUPAC_2001},
    {"15N", -2.71261804e7, 1, IUPAC_2001},   /* value from memory */
    {"19F", 25.18148e7, 1, IUPAC_2001},
    {"23Na", 7.0808493e7, 3, IUPAC_2001},    /* value from memory */
    {"31P", 10.8394e7, 1, IUPAC_2001},
    {"129Xe", -7.452103e7, 1, IUPAC_2001},
};

#define NUCLEI_COUNT (sizeof NUCLEI / sizeof NUCLEI[0])

const nuc_info *nuc_find(const char *token, size_t len) {
    for (size_t i = 0; i < NUCLEI_COUNT; i++)
        if (strlen(NUCLEI[i].token) == len && memcmp(NUCLEI[i].token, token, len) == 0)
            return &NUCLEI[i];
    return NULL;
}

/* One to three digits, then an element symbol: a capital letter and at
 * most one lower-case letter ("1H", "13C", "129Xe", "14Q"). */
int nuc_is_token(const char *text, size_t len) {
    size_t i = 0;
    while (i < len && text[i] >= '0' && text[i] <= '9') i++;
    if (i == 0 || i > 3 || text[0] == '0') return 0;
    if (i >= len || text[i] < 'A' || text[i] > 'Z') return 0;
    i++;
    if (i < len && text[i] >= 'a' && text[i] <= 'z') i++;
    return i == len;
}

const nuc_info *nuc_table(size_t *n) {
    *n = NUCLEI_COUNT;
    return NUCLEI;
}
