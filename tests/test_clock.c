/* test_clock: the real clock's spin before a deadline, learnt from how late
 * its sleeps woke (the 90th percentile of the last 64 plus a pad, within
 * bounds), and its waits never returning before the deadline. Not for the
 * scheduler's events (test_schedule_limit.c, the e2e tests). */
#include <stdarg.h>
#include <stddef.h>
#include <stdint.h>
#include <setjmp.h>
#include <cmocka.h>

#include <math.h>

#include "schedule.h"

#define US 1e-6

static void assert_near(double got, double want) {
    if (!(fabs(got - want) <= 1e-12)) fail_msg("got %.9g s, want %.9g s", got, want);
}

static void test_before_any_sleep_the_spin_is_generous(void **state) {
    (void)state;
    assert_near(clock_spin_for(NULL, 0), 200 * US);
    assert_near(CLOCK_SPIN_FIRST, 200 * US);
    sched_clock *c = clock_new(false);
    assert_non_null(c);
    assert_near(clock_spin(c), 200 * US);
    clock_free(c);
}

static void test_a_host_whose_sleeps_wake_late_spins_longer(void **state) {
    (void)state;
    double late[CLOCK_LATE_KEPT];
    for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) late[i] = 110 * US;
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT), 110 * US + CLOCK_SPIN_PAD);
    for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) late[i] = (double)(i % 10) * 10 * US;
    /* 0..90 us in tens, 0..30 seven times and the rest six: the 58th of 64
     * in order (the 90th percentile) is 80 us */
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT), 80 * US + CLOCK_SPIN_PAD);
}

static void test_the_rare_delayed_wake_up_does_not_set_the_spin(void **state) {
    (void)state;
    double late[CLOCK_LATE_KEPT];
    for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) late[i] = 100 * US;
    for (size_t i = 0; i < 6; i++) late[i * 9] = 2e-3;   /* 6 in 64 delayed by 2 ms */
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT), 100 * US + CLOCK_SPIN_PAD);
    late[63] = 2e-3;                                     /* 7 in 64: past one in ten */
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT), CLOCK_SPIN_MOST);
}

static void test_the_spin_stays_within_its_bounds(void **state) {
    (void)state;
    double late[CLOCK_LATE_KEPT];
    for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) late[i] = -30 * US;
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT), CLOCK_SPIN_PAD);
    for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) late[i] = 5e-3;
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT), CLOCK_SPIN_MOST);
    assert_true(CLOCK_SPIN_MOST < 1e-3);   /* within the loop's early wake-up */
}

static void test_no_more_than_the_kept_sleeps_are_read(void **state) {
    (void)state;
    double late[CLOCK_LATE_KEPT + 1];
    for (size_t i = 0; i < CLOCK_LATE_KEPT; i++) late[i] = 40 * US;
    late[CLOCK_LATE_KEPT] = 3e-3;   /* past what is kept: not read */
    assert_near(clock_spin_for(late, CLOCK_LATE_KEPT + 1), 40 * US + CLOCK_SPIN_PAD);
    assert_near(clock_spin_for(late, 1), 40 * US + CLOCK_SPIN_PAD);
}

static void test_real_waits_learn_a_spin_and_never_return_early(void **state) {
    (void)state;
    sched_clock *c = clock_new(false);
    assert_non_null(c);
    double t = clock_now(c);
    for (int k = 0; k < CLOCK_LATE_KEPT + 10; k++) {
        if (k == 3 && !(clock_spin(c) >= CLOCK_SPIN_FIRST))
            fail_msg("spin %.3g s after 3 sleeps: the prior should hold it", clock_spin(c));
        t += 1e-3;
        clock_wait_until(c, t);
        double now = clock_now(c);
        if (now < t) fail_msg("wait %d returned %.3g s before its deadline", k, t - now);
        if (now > t) t = now;   /* a wait the host delayed starts the next one */
    }
    /* every kept sleep is a measured one now: the spin is learnt from them */
    assert_true(clock_spin(c) != CLOCK_SPIN_FIRST);
    clock_free(c);
}

static void test_the_virtual_clock_jumps_and_never_goes_back(void **state) {
    (void)state;
    sched_clock *c = clock_new(true);
    assert_non_null(c);
    assert_near(clock_now(c), 0);
    clock_wait_until(c, 2.5);
    assert_near(clock_now(c), 2.5);
    clock_wait_until(c, 1.0);
    assert_near(clock_now(c), 2.5);
    clock_free(c);
}

int main(void) {
    const struct CMUnitTest tests[] = {
        cmocka_unit_test(test_before_any_sleep_the_spin_is_generous),
        cmocka_unit_test(test_a_host_whose_sleeps_wake_late_spins_longer),
        cmocka_unit_test(test_the_rare_delayed_wake_up_does_not_set_the_spin),
        cmocka_unit_test(test_the_spin_stays_within_its_bounds),
        cmocka_unit_test(test_no_more_than_the_kept_sleeps_are_read),
        cmocka_unit_test(test_real_waits_learn_a_spin_and_never_return_early),
        cmocka_unit_test(test_the_virtual_clock_jumps_and_never_goes_back),
    };
    return cmocka_run_group_tests(tests, NULL, NULL);
}
