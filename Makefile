# Convenience entry points. Each target installs missing Debian packages first (as root or
# with sudo), then configures and builds with CMake into build/.
BUILD ?= build
JOBS ?= $(shell nproc)
CMAKE_FLAGS ?= -DCMAKE_BUILD_TYPE=Release

.PHONY: all deps configure build test demo bench asan format clean

all: build

deps:
	@bash scripts/install-deps.sh

configure: deps
	@mkdir -p $(BUILD)
	@cmake -S . -B $(BUILD) $(CMAKE_FLAGS) > $(BUILD)/configure.log 2>&1 || (cat $(BUILD)/configure.log; exit 1)

build: configure
	@cmake --build $(BUILD) -j $(JOBS)

test: build
	@bash scripts/run-tests.sh $(BUILD)

demo: build
	@bash samples/demo.sh $(BUILD)

bench: build
	@OPENBLAS_NUM_THREADS=1 $(BUILD)/bin/sprig_bench --benchmark_min_time=0.2

asan:
	@$(MAKE) test BUILD=build-asan CMAKE_FLAGS="-DCMAKE_BUILD_TYPE=RelWithDebInfo -DSPRIG_SANITIZE=ON -DSPRIG_BUILD_BENCHMARKS=OFF"

format:
	@clang-format -i $$(git ls-files '*.cc' '*.h')

clean:
	@rm -rf $(BUILD) build-asan
