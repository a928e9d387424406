# weft build. Every output goes under $(BUILD) (default build/).
# Targets: all (default), test, demo, bench, fuzz, check-asan, check-symbols, deps, clean.

BUILD   ?= build
CC      ?= cc
OPT     ?= -O2 -g
CFLAGS  ?= $(OPT)
WARN    := -std=c11 -D_POSIX_C_SOURCE=200809L -Wall -Wextra -Wpedantic -Wshadow \
           -Wstrict-prototypes -Wmissing-prototypes -Werror -MMD -MP
CPPFLAGS += -Iinclude
LDFLAGS ?=
LIBS    := -lmicrohttpd -ljansson -llmdb -lopenblas -lnettle -lz -lpthread -lm

CORE_SRC   := $(wildcard core/*.c)
SERVER_SRC := $(wildcard server/*.c)
UNIT_SRC   := $(wildcard tests/unit/*.c) $(wildcard tests/reference/*.c)

CORE_OBJ   := $(CORE_SRC:%.c=$(BUILD)/%.o)
SERVER_OBJ := $(SERVER_SRC:%.c=$(BUILD)/%.o)
UNIT_OBJ   := $(UNIT_SRC:%.c=$(BUILD)/%.o)

.PHONY: all test unit e2e demo bench fuzz check-asan check-symbols deps clean

all: $(BUILD)/libweft.a $(BUILD)/weft

$(BUILD)/%.o: %.c
	@mkdir -p $(dir $@)
	$(CC) $(CPPFLAGS) $(WARN) $(CFLAGS) -c $< -o $@

# The dense training loops need the vectoriser's full cost model (include/weft/kernels.h).
$(BUILD)/core/kernels.o $(BUILD)/core/gemm.o $(BUILD)/core/sparse.o $(BUILD)/core/model_gcn.o $(BUILD)/core/topk.o: CFLAGS += -O3

$(BUILD)/libweft.a: $(CORE_OBJ)
	@mkdir -p $(dir $@)
	rm -f $@
	ar rcs $@ $^

$(BUILD)/weft: $(SERVER_OBJ) $(BUILD)/libweft.a
	$(CC) $(CFLAGS) $(LDFLAGS) -o $@ $(SERVER_OBJ) $(BUILD)/libweft.a $(LIBS)

$(BUILD)/unit_tests: $(UNIT_OBJ) $(BUILD)/libweft.a
	$(CC) $(CFLAGS) $(LDFLAGS) -o $@ $(UNIT_OBJ) $(BUILD)/libweft.a -lcriterion $(LIBS)

# The writer tests/e2e/test_crash.sh kills, built like everything else (sanitizers included).
$(BUILD)/crash_writer: tests/e2e/crash_writer.c $(BUILD)/libweft.a
	$(CC) $(CPPFLAGS) $(WARN) $(CFLAGS) $(LDFLAGS) -o $@ $< $(BUILD)/libweft.a $(LIBS)

# Installs missing Debian packages (no-op when everything is present).
deps:
	@deploy/install-deps.sh --check >/dev/null 2>&1 || deploy/install-deps.sh

# Every test: Criterion unit and reference tests, then end-to-end tests; the last line
# of output is the overall summary and the exit status is the verdict.
test: deps
	@$(MAKE) --no-print-directory all $(BUILD)/unit_tests $(BUILD)/crash_writer
	@BUILD=$(BUILD) tests/run-all.sh

unit: all $(BUILD)/unit_tests
	$(BUILD)/unit_tests

e2e: all
	BUILD=$(BUILD) tests/e2e/run.sh

# Trains on the demo data and serves it on 127.0.0.1:$(DEMO_PORT).
DEMO_PORT ?= 8080
demo: deps
	@$(MAKE) --no-print-directory all
	@BUILD=$(BUILD) PORT=$(DEMO_PORT) deploy/demo.sh

bench: all
	@deploy/install-deps.sh --bench --check >/dev/null 2>&1 || deploy/install-deps.sh --bench
	BUILD=$(BUILD) bench/run.sh

# UBSan findings stop the process, so they fail the test that met them. Every unit test and
# the e2e tests run instrumented, except five that measure rather than exercise new code paths
# (the quality runs over many seeds, the 30 s load test, the 20 kills): under the sanitizers
# they would take most of CI's 40 minutes. The code they run is covered by the others.
ASAN_E2E_SKIP := test_gcn test_gcn_link test_link_models test_hotswap test_crash
check-asan:
	UBSAN_OPTIONS=halt_on_error=1:print_stacktrace=1 ASAN_OPTIONS=detect_leaks=1 \
	E2E_SKIP="$(ASAN_E2E_SKIP)" $(MAKE) BUILD=build-asan OPT="-O1 -g -fno-omit-frame-pointer -fsanitize=address,undefined" \
	    LDFLAGS="-fsanitize=address,undefined" test

check-symbols: $(BUILD)/libweft.a
	@bad=$$(nm -g --defined-only $(BUILD)/libweft.a | awk 'NF==3 {print $$3}' | grep -v '^weft_' || true); \
	if [ -n "$$bad" ]; then echo "symbols without weft_ prefix:"; echo "$$bad"; exit 1; fi; \
	echo "check-symbols: ok"

clean:
	rm -rf $(BUILD) build-asan build-fuzz

-include $(CORE_OBJ:.o=.d) $(SERVER_OBJ:.o=.d) $(UNIT_OBJ:.o=.d)
