# precess: build, test, demo and install.
# `make` builds build/precess; objects stay under build/. `make check` and
# `make demo` first install missing Debian packages (`make deps`).

PREFIX ?= /usr/local
DESTDIR ?=
CC ?= cc
PYTHON := /usr/bin/python3
FUZZ_SECONDS ?= 60

# Debian packages the build, the tests and the demo need.
DEB_PACKAGES := pkg-config libyaml-dev libev-dev libcomedi-dev libcmocka-dev \
  libhdf5-dev libdeflate-dev libjansson-dev libfftw3-dev libgsl-dev libplplot-dev \
  plplot-driver-cairo python3 python3-numpy python3-scipy python3-h5py
FUZZ_PACKAGES := clang libclang-rt-14-dev

PKGS := yaml-0.1 jansson gsl plplot hdf5 fftw3 libdeflate
PKG_CFLAGS = $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
PKG_LIBS = $(shell pkg-config --libs $(PKGS) 2>/dev/null)

VERSION := $(shell cat VERSION 2>/dev/null || echo 0.0.0)
WARN := -Wall -Wextra -Werror
CFLAGS ?= -O2 -g
ALL_CFLAGS = -std=c11 $(WARN) -D_DEFAULT_SOURCE -D_GNU_SOURCE \
  -DPRECESS_VERSION='"$(VERSION)"' -Isequencer -Idrivers -Ianalysis \
  $(PKG_CFLAGS) $(CFLAGS) $(EXTRA_CFLAGS)
LIBS = $(PKG_LIBS) -lev -lpthread -lm $(EXTRA_LIBS)

B ?= build
LIB_SRCS := $(wildcard sequencer/*.c drivers/*.c drivers/*/*.c analysis/*.c)
CLI_SRCS := $(wildcard sequencer/cli/*.c)
LIB_OBJS := $(LIB_SRCS:%.c=$(B)/%.o)
CLI_OBJS := $(CLI_SRCS:%.c=$(B)/%.o)
TEST_SRCS := $(wildcard tests/test_*.c)
TEST_BINS := $(TEST_SRCS:tests/%.c=$(B)/tests/%)
HEADERS := $(wildcard sequencer/*.h sequencer/cli/*.h drivers/*.h drivers/*/*.h analysis/*.h bench/*.h tests/*.h)

.PHONY: all deps check test sanitize fuzz fuzz-deps demo install clean bench clang-check
all: $(B)/precess

$(B)/%.o: %.c $(HEADERS)
	@mkdir -p $(dir $@)
	@echo "  CC      $<"
	@$(CC) $(ALL_CFLAGS) -c $< -o $@

$(B)/libprecess.a: $(LIB_OBJS)
	@rm -f $@
	@ar rcs $@ $^

$(B)/precess: $(CLI_OBJS) $(B)/libprecess.a
	@echo "  LINK    $@"
	@$(CC) $(ALL_CFLAGS) -o $@ $(CLI_OBJS) $(B)/libprecess.a $(LIBS)

$(B)/tests/%: tests/%.c $(B)/libprecess.a $(HEADERS)
	@mkdir -p $(dir $@)
	@echo "  TEST    $@"
	@$(CC) $(ALL_CFLAGS) $(shell pkg-config --cflags cmocka) -o $@ $< \
	  $(B)/libprecess.a $(LIBS) $(shell pkg-config --libs cmocka) $(TEST_LDFLAGS)

# test_store watches the committer's fsyncs and renames through the link.
$(B)/tests/test_store: TEST_LDFLAGS = -Wl,--wrap=fsync -Wl,--wrap=renameat

# Install what is missing (as root), or say exactly what to run.
deps:
	@sh tests/deps.sh $(DEB_PACKAGES)

# Every test: unit tests (cmocka), reference checks and end-to-end runs.
test: $(B)/precess $(TEST_BINS)
	@PRECESS=$(abspath $(B)/precess) PYTHON=$(PYTHON) B=$(B) sh tests/run.sh $(TEST_BINS)

check: deps
	@$(MAKE) --no-print-directory test

sanitize: deps
	@LSAN_OPTIONS=suppressions=$(abspath tests/lsan.supp):print_suppressions=0 \
	  $(MAKE) --no-print-directory B=build/asan \
	  EXTRA_CFLAGS="-fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=undefined" \
	  EXTRA_LIBS="-fsanitize=address,undefined" CFLAGS="-O1 -g" test

fuzz-deps:
	@sh tests/deps.sh $(FUZZ_PACKAGES)

# A bounded libFuzzer run of the plan reader, seeded from plans/.
fuzz: fuzz-deps
	@$(MAKE) --no-print-directory B=build/fuzz CC=clang \
	  EXTRA_CFLAGS="-fsanitize=fuzzer-no-link,address,undefined" build/fuzz/libprecess.a
	clang -std=c11 -g -Isequencer $(PKG_CFLAGS) -fsanitize=fuzzer,address,undefined \
	  fuzz/fuzz_plan.c build/fuzz/libprecess.a $(LIBS) -o build/fuzz/fuzz_plan
	@mkdir -p build/fuzz/corpus
	@cp plans/*.yaml plans/rigs/*.yaml tests/plans/*.yaml build/fuzz/corpus/ 2>/dev/null || true
	build/fuzz/fuzz_plan -max_total_time=$(FUZZ_SECONDS) -timeout=10 -rss_limit_mb=2048 \
	  -dict=fuzz/plan.dict build/fuzz/corpus

# Build, then check every example plan in simulation, printing its summary.
demo: deps
	@$(MAKE) --no-print-directory $(B)/precess
	@PRECESS=$(abspath $(B)/precess) sh plans/demo.sh

# The same build with clang, warnings as errors (C11, -Wall -Wextra).
clang-check: fuzz-deps
	@$(MAKE) --no-print-directory B=build/clang CC=clang build/clang/precess \
	  $(TEST_BINS:$(B)/%=build/clang/%)

BENCH_SRCS := $(wildcard bench/*.c)
BENCH_BINS := $(BENCH_SRCS:bench/%.c=$(B)/bench/%)

$(B)/bench/%: bench/%.c $(B)/libprecess.a $(HEADERS)
	@mkdir -p $(dir $@)
	@echo "  BENCH   $@"
	@$(CC) $(ALL_CFLAGS) -o $@ $< $(B)/libprecess.a $(LIBS)

# Speed and memory against their targets, with baselines measured in the
# same run; never part of make check.
bench: $(B)/precess $(BENCH_BINS)
	@for b in $(BENCH_BINS); do $$b || exit 1; done

install: $(B)/precess
	install -d $(DESTDIR)$(PREFIX)/bin $(DESTDIR)$(PREFIX)/share/man/man1
	install -m 755 $(B)/precess $(DESTDIR)$(PREFIX)/bin/precess
	install -m 644 docs/precess.1 $(DESTDIR)$(PREFIX)/share/man/man1/precess.1

clean:
	rm -rf build
