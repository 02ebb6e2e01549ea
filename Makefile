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
BUILD ?= build
JOBS ?= 2
DEMO ?= demo-out
SPLITLOT = $(BUILD)/splitlot

.PHONY: all deps deps-test build demo check check-pg asan fuzz valgrind bench bench-reference clean

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

check: deps-test build
	@cd $(BUILD) && ctest --output-on-failure -j$(JOBS)

# .ci/pg-start starts the server, sets SPLITLOT_TEST_DB for tests/support and
# stops it afterwards
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
	rm -rf $(BUILD) build-asan build-release build-fuzz build-valgrind $(DEMO)
