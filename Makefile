# SPDX-License-Identifier: MIT
# Thin wrapper over CMake for the README's commands:
#   make demo   install what is missing, build, run the demo plan end to end
#   make check  install what is missing, build, run the whole test suite
#   make check-pg  the whole test suite against a throwaway PostgreSQL server
#   make asan   the test suite under AddressSanitizer + UndefinedBehaviorSanitizer
#   make fuzz   the libFuzzer targets, FUZZ_SECONDS (default 60) each
#   make valgrind  the test suite under valgrind memcheck (Debug build)
#   make bench  build in Release and run the benchmarks (figures, not tests)
#   make bench-reference  splitlot against the pandas + SciPy script, 1k/12.5k/50k devices
#   make tsan   the threaded import's suites (ingest, reliability) under ThreadSanitizer
#   make golden rewrite the golden outputs under tests/data/analyze from this build (only
#               for an intended output change, reviewed in the diff; DEVELOPERS.md)
#   make install  build and install under PREFIX (default /usr/local), staged
#                 under DESTDIR when given (docs/install.md)
BUILD ?= build
JOBS ?= 2
DEMO ?= demo-out
SPLITLOT = $(BUILD)/splitlot
PREFIX ?= /usr/local
DESTDIR ?=

.PHONY: all deps deps-test build install demo check check-pg asan tsan golden fuzz valgrind bench bench-reference clean

all: build

deps:
	@./.ci/install-deps build

deps-test:
	@./.ci/install-deps test

# the build log is shown only when something fails
build: deps
	@echo "building in $(BUILD)/ (log: $(BUILD)/build.log)"
	@mkdir -p $(BUILD)
	@{ cmake -S . -B $(BUILD) -DCMAKE_BUILD_TYPE=RelWithDebInfo && \
	   cmake --build $(BUILD) -j$(JOBS); } >$(BUILD)/build.log 2>&1 || \
	   { cat $(BUILD)/build.log; exit 1; }

# configured for PREFIX, so the library directory follows the platform's rule
# for that prefix (lib/<multiarch> under /usr on Debian)
install: deps
	@mkdir -p $(BUILD)
	@{ cmake -S . -B $(BUILD) -DCMAKE_INSTALL_PREFIX="$(PREFIX)" && \
	   cmake --build $(BUILD) -j$(JOBS); } >$(BUILD)/build.log 2>&1 || \
	   { cat $(BUILD)/build.log; exit 1; }
	DESTDIR="$(DESTDIR)" cmake --install $(BUILD) --prefix "$(PREFIX)"

check: deps-test build
	@cd $(BUILD) && ctest --output-on-failure -j$(JOBS)

# .ci/pg-start starts a throwaway server, sets SPLITLOT_TEST_DB for
# tests/support and stops the server afterwards
check-pg: deps-test build
	@./.ci/pg-start sh -c 'cd $(BUILD) && ctest --output-on-failure -j$(JOBS)'

asan: deps-test
	@echo "building in build-asan/ (log: build-asan/build.log)"
	@mkdir -p build-asan
	@{ cmake -S . -B build-asan -DCMAKE_BUILD_TYPE=Debug -DSL_SANITIZE=ON && \
	   cmake --build build-asan -j$(JOBS); } >build-asan/build.log 2>&1 || \
	   { cat build-asan/build.log; exit 1; }
	@cd build-asan && ASAN_OPTIONS=detect_leaks=1:abort_on_error=1 \
	  UBSAN_OPTIONS=print_stacktrace=1:halt_on_error=1 ctest --output-on-failure -j$(JOBS)

# the import's reading, fitting and writing threads (tests spawn the TSan-built binary);
# a race makes the program exit 66, which fails the test
TSAN_SUITES ?= test_ingest|test_reliability|test_layout
tsan: deps-test
	@echo "building in build-tsan/ (log: build-tsan/build.log)"
	@mkdir -p build-tsan
	@{ cmake -S . -B build-tsan -DCMAKE_BUILD_TYPE=RelWithDebInfo -DSL_TSAN=ON && \
	   cmake --build build-tsan -j$(JOBS); } >build-tsan/build.log 2>&1 || \
	   { cat build-tsan/build.log; exit 1; }
	@cd build-tsan && TSAN_OPTIONS="halt_on_error=1 exitcode=66 second_deadlock_stack=1" \
	  ctest --output-on-failure -j$(JOBS) -R '^($(TSAN_SUITES))$$'

# the golden files are written by the very tests that check them
GOLDEN_SUITES ?= test_analyze
golden: build
	@for t in $(GOLDEN_SUITES); do SL_REGENERATE_GOLDEN=1 $(BUILD)/tests/$$t >/dev/null || exit 1; done
	@git status --short tests/data

fuzz:
	@./.ci/fuzz

valgrind:
	@./.ci/valgrind

bench: deps
	@cmake -S . -B build-release -DCMAKE_BUILD_TYPE=Release >/dev/null
	@cmake --build build-release -j$(JOBS)
	@for b in build-release/tests/bench_*; do echo "== $$b"; $$b; done
	@for b in tests/bench/bench_*.sh; do echo "== $$b"; $$b build-release; done

bench-reference: bench
	@tests/bench/vs_reference.sh build-release

demo: build
	@./.ci/demo $(SPLITLOT) $(DEMO)

clean:
	rm -rf $(BUILD) build-asan build-tsan build-release build-fuzz build-valgrind $(DEMO)
