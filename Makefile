# SPDX-License-Identifier: GPL-3.0-or-later
# etacal build.  `make` builds build/etacal and build/libetacal.a; `make check`
# runs every test; `make demo` runs the main job on the bundled demo data.
# Both install missing Debian packages first when they can (scripts/deps.sh).

CC       ?= cc
# A packager's CFLAGS, CPPFLAGS and LDFLAGS are honoured; the language
# standard and the warning set (WARN) are always added, so they cannot be
# lost by overriding CFLAGS.
CFLAGS   ?= -O2 -g
CPPFLAGS ?=
LDFLAGS  ?=
WARN     := -std=c11 -Wall -Wextra -Wpedantic -Wshadow -Wstrict-prototypes -Wmissing-prototypes
WERROR   ?=
SAN      ?=
BUILD    ?= build
PREFIX   ?= /usr/local
BINDIR   ?= $(PREFIX)/bin
LIBDIR   ?= $(PREFIX)/lib
INCLUDEDIR ?= $(PREFIX)/include
MANDIR   ?= $(PREFIX)/share/man
DESTDIR  ?=
PYTHON   ?= /usr/bin/python3

PKGS      := gsl jansson
PKG_CFLAGS := $(shell pkg-config --cflags $(PKGS) 2>/dev/null)
PKG_LIBS   := $(shell pkg-config --libs $(PKGS) 2>/dev/null || echo -lgsl -lgslcblas -ljansson -lm)
CMOCKA_CFLAGS := $(shell pkg-config --cflags cmocka 2>/dev/null)
CMOCKA_LIBS   := $(shell pkg-config --libs cmocka 2>/dev/null || echo -lcmocka)

ALL_CFLAGS = $(WARN) $(CFLAGS) $(WERROR) $(SAN) $(CPPFLAGS) -D_POSIX_C_SOURCE=200809L -Iinclude -Isrc $(PKG_CFLAGS)
LDLIBS_ALL = $(LDFLAGS) -lcsv $(PKG_LIBS) -lm
# The library's own dependencies (jansson writes publish's provenance record).
LIB_LIBS   := -lcsv $(shell pkg-config --libs gsl jansson 2>/dev/null || echo -lgsl -lgslcblas -ljansson) -lm
# Library objects: position-independent (they make libetacal.so too) and
# hidden by default; the public headers mark their declarations visible
# (#pragma GCC visibility), so libetacal.so exports etacal_* only.
LIB_CFLAGS := -fPIC -fvisibility=hidden

LIB_SRC := $(wildcard src/*.c)
CLI_SRC := $(wildcard src/cli/*.c)
LIB_OBJ := $(LIB_SRC:src/%.c=$(BUILD)/obj/%.o)
CLI_OBJ := $(CLI_SRC:src/cli/%.c=$(BUILD)/obj/cli/%.o)
HDRS    := $(wildcard include/etacal/*.h) $(wildcard src/*.h) $(wildcard src/cli/*.h)
UNIT_SRC := $(wildcard tests/unit/test_*.c)
UNIT_BIN := $(UNIT_SRC:tests/unit/%.c=$(BUILD)/tests/%)
LIB      := $(BUILD)/libetacal.a
# The same objects as a plain archive, internal symbols included, for the
# unit tests, the reference calculator and the fuzz targets only.
TLIB     := $(BUILD)/libetacal-internal.a
SOVER    := 0
SONAME   := libetacal.so.$(SOVER)
SOFILE   := libetacal.so.$(SOVER).1.0
SHLIB    := $(BUILD)/$(SOFILE)
BIN      := $(BUILD)/etacal
CITYGEN  := $(BUILD)/citygen

.PHONY: all deps demo check test unit e2e ref fault asan install uninstall clean golden bench bench-qr format report-check browser \
        fuzz memcheck failmalloc exports headers install-check

all: $(BIN) $(LIB) $(SHLIB)

deps:
	@sh scripts/deps.sh

$(BUILD)/obj/cli/%.o: src/cli/%.c $(HDRS)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -c $< -o $@

$(BUILD)/obj/%.o: src/%.c $(HDRS)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) $(LIB_CFLAGS) -c $< -o $@

# libetacal.a holds one object, linked from all of the library's, whose
# hidden symbols (every name that is not etacal_*) are made local: a
# program linking it statically cannot clash with grow_array or strdict_*.
$(LIB): $(LIB_OBJ)
	@rm -f $@
	$(CC) -nostdlib -r -o $(BUILD)/libetacal-one.o $(LIB_OBJ)
	objcopy --localize-hidden $(BUILD)/libetacal-one.o
	ar rcs $@ $(BUILD)/libetacal-one.o

$(TLIB): $(LIB_OBJ)
	@rm -f $@
	ar rcs $@ $^

# libetacal.so.0 (the SONAME) -> libetacal.so.0.1.0; libetacal.so for -letacal.
$(SHLIB): $(LIB_OBJ)
	$(CC) $(ALL_CFLAGS) -shared -Wl,-soname,$(SONAME) -Wl,--no-undefined -o $@ $(LIB_OBJ) $(LDFLAGS) $(LIB_LIBS)
	ln -sf $(SOFILE) $(BUILD)/$(SONAME)
	ln -sf $(SONAME) $(BUILD)/libetacal.so

# The CLI links the static library: no LD_LIBRARY_PATH needed to run it.
$(BIN): $(CLI_OBJ) $(LIB)
	$(CC) $(ALL_CFLAGS) -o $@ $(CLI_OBJ) $(LIB) $(LDLIBS_ALL)

$(CITYGEN): examples/citygen.c
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -o $@ $< $(LDFLAGS) -lm

$(BUILD)/tests/%: tests/unit/%.c $(wildcard tests/unit/*.h) $(TLIB)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) $(CMOCKA_CFLAGS) -Itests/unit -o $@ $< $(TLIB) $(CMOCKA_LIBS) $(LDLIBS_ALL)

# the replay of the fuzz corpora includes the targets' sources
$(BUILD)/tests/test_fuzz_replay: $(wildcard tests/fuzz/*.c tests/fuzz/*.h)

$(BUILD)/quantgen: tests/tools/quantgen.c
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -o $@ $< $(LDFLAGS) -lm

$(BUILD)/tests/refcalc: tests/ref/refcalc.c $(TLIB)
	@mkdir -p $(dir $@)
	$(CC) $(ALL_CFLAGS) -o $@ $< $(TLIB) $(LDLIBS_ALL)

# ---- tests ---------------------------------------------------------------
# The whole suite, then the same under ASan + UBSan, a subset under valgrind
# memcheck, and the out-of-memory runs (tests/tools/failmalloc.sh).
# `make check` first installs what the build and every test need (as root;
# otherwise it prints the apt-get line), oracles included, then runs `make
# test`, which installs nothing.
check:
	@sh scripts/deps.sh --oracles
	@$(MAKE) --no-print-directory test

test:
	@$(MAKE) --no-print-directory unit e2e ref fault report-check browser exports headers install-check
	@$(MAKE) --no-print-directory asan
	@$(MAKE) --no-print-directory memcheck failmalloc

# make install into a temporary DESTDIR, and examples/embed.c built against
# it with pkg-config (tests/tools/install.sh).
install-check: $(BIN) $(LIB) $(SHLIB)
	@sh tests/tools/install.sh

# libetacal.so exports etacal_* only and has its SONAME.
exports: $(SHLIB) $(LIB)
	@sh tests/tools/exports.sh $(BUILD) $(SONAME)

# Every public header compiles on its own, as C11 and (with a C++ compiler) C++11.
headers:
	@sh tests/tools/headers.sh "$(CC)" "$(CXX)" "$(WERROR)"

unit: $(UNIT_BIN)
	@fail=0; for t in $(UNIT_BIN); do \
	  echo "== $$t"; $$t || fail=1; \
	done; exit $$fail

e2e: $(BIN) $(CITYGEN) $(BUILD)/quantgen
	@sh tests/e2e/run.sh $(BIN)

ref: $(BIN) $(BUILD)/tests/refcalc $(CITYGEN)
	@sh tests/ref/run.sh $(BUILD) $(PYTHON)

# publish killed at random moments, a full disk, a read-only file system
fault: $(BIN) $(CITYGEN)
	@sh tests/fault/run.sh $(BUILD)

# The report page as a file (tests/report), and rendered by headless
# Chromium (tests/browser; skips visibly without chromium).
report-check: $(BIN) $(CITYGEN)
	@sh tests/report/run.sh $(BIN) $(CITYGEN) $(PYTHON)

browser: $(BIN) $(CITYGEN)
	@sh tests/browser/run.sh $(BUILD) $(PYTHON)

golden: $(BIN) $(CITYGEN) $(BUILD)/quantgen
	@ETACAL_GOLDEN=1 sh tests/e2e/run.sh $(BIN)

# The same suite built with AddressSanitizer and UndefinedBehaviorSanitizer.
asan:
	@$(MAKE) --no-print-directory BUILD=build-asan \
	  SAN="-fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=all" \
	  unit e2e ref fault report-check

# A subset under valgrind memcheck, zero reports (skips without valgrind).
memcheck: $(BIN) $(CITYGEN) $(UNIT_BIN)
	@sh tests/tools/memcheck.sh $(BUILD)

# Out of memory is reported, not a crash: commands with the Nth allocation
# failing (an LD_PRELOAD hook; not under ASan, which has its own allocator).
$(BUILD)/failmalloc.so: tests/tools/failmalloc.c
	@mkdir -p $(dir $@)
	$(CC) $(WARN) $(CFLAGS) $(WERROR) $(CPPFLAGS) -fPIC -shared -o $@ $< $(LDFLAGS)

failmalloc: $(BIN) $(CITYGEN) $(BUILD)/failmalloc.so
	@sh tests/tools/failmalloc.sh $(BUILD)

# ---- demo ----------------------------------------------------------------
DEMO := $(BUILD)/demo
demo:
	@sh scripts/deps.sh
	@$(MAKE) --no-print-directory $(BIN) $(CITYGEN)
	@sh examples/demo.sh $(BUILD)

bench: $(BIN)
	bash bench/run.sh

bench-qr: $(LIB)
	bash bench/qr_run.sh

# ---- install -------------------------------------------------------------
# PREFIX, BINDIR, LIBDIR (say /usr/lib/x86_64-linux-gnu), INCLUDEDIR, MANDIR
# and DESTDIR as packagers expect; etacal.pc is made from etacal.pc.in here.
install: $(BIN) $(LIB) $(SHLIB)
	install -d $(DESTDIR)$(BINDIR) $(DESTDIR)$(LIBDIR)/pkgconfig $(DESTDIR)$(INCLUDEDIR)/etacal \
	  $(DESTDIR)$(MANDIR)/man1
	install -m 755 $(BIN) $(DESTDIR)$(BINDIR)/etacal
	install -m 644 $(LIB) $(DESTDIR)$(LIBDIR)/libetacal.a
	install -m 755 $(SHLIB) $(DESTDIR)$(LIBDIR)/$(SOFILE)
	ln -sf $(SOFILE) $(DESTDIR)$(LIBDIR)/$(SONAME)
	ln -sf $(SONAME) $(DESTDIR)$(LIBDIR)/libetacal.so
	install -m 644 include/etacal/*.h $(DESTDIR)$(INCLUDEDIR)/etacal/
	sed -e 's|@PREFIX@|$(PREFIX)|g' -e 's|@LIBDIR@|$(LIBDIR)|g' -e 's|@INCLUDEDIR@|$(INCLUDEDIR)|g' \
	  -e "s|@VERSION@|$$(sed -n 's/^#define ETACAL_VERSION \"\(.*\)\"/\1/p' include/etacal/etacal.h)|g" \
	  etacal.pc.in >$(DESTDIR)$(LIBDIR)/pkgconfig/etacal.pc
	chmod 644 $(DESTDIR)$(LIBDIR)/pkgconfig/etacal.pc
	install -m 644 docs/etacal.1 $(DESTDIR)$(MANDIR)/man1/etacal.1

uninstall:
	rm -f $(DESTDIR)$(BINDIR)/etacal $(DESTDIR)$(LIBDIR)/libetacal.a $(DESTDIR)$(LIBDIR)/$(SOFILE) \
	  $(DESTDIR)$(LIBDIR)/$(SONAME) $(DESTDIR)$(LIBDIR)/libetacal.so $(DESTDIR)$(LIBDIR)/pkgconfig/etacal.pc \
	  $(DESTDIR)$(MANDIR)/man1/etacal.1
	rm -rf $(DESTDIR)$(INCLUDEDIR)/etacal

format:
	clang-format -i src/*.c src/cli/*.c src/*.h src/cli/*.h include/etacal/*.h tests/unit/*.c

# ---- fuzzing ---------------------------------------------------------------
# libFuzzer targets (tests/fuzz/fuzz_*.c), built with clang and ASan + UBSan
# over a library whose two-part parallel CSV read starts at 64 bytes instead
# of 16 MiB, so that small inputs reach it.  Each runs FUZZ_SECONDS on a
# working corpus in build-fuzz/ seeded from tests/fuzz/corpus/ and
# tests/fuzz/regress/; a crash leaves build-fuzz/crash-* (copy it to
# tests/fuzz/regress/<target>/ once fixed).
FUZZ_CC      ?= clang
FUZZ_SECONDS ?= 60
FUZZ_BUILD   := build-fuzz
FUZZ_TARGETS := csv quotes time
FUZZ_SAN     := -fsanitize=address,undefined -fno-sanitize-recover=all -fno-omit-frame-pointer
fuzz:
	@command -v $(FUZZ_CC) >/dev/null 2>&1 || { echo "SKIP fuzz: $(FUZZ_CC) is not installed (scripts/deps.sh --oracles installs clang)"; exit 0; }; \
	$(MAKE) --no-print-directory BUILD=$(FUZZ_BUILD) CC=$(FUZZ_CC) \
	  SAN="$(FUZZ_SAN) -fsanitize=fuzzer-no-link -DETACAL_PARALLEL_MIN=64" $(FUZZ_BUILD)/libetacal-internal.a && \
	for t in $(FUZZ_TARGETS); do \
	  $(FUZZ_CC) $(ALL_CFLAGS) $(FUZZ_SAN) -fsanitize=fuzzer -o $(FUZZ_BUILD)/fuzz_$$t tests/fuzz/fuzz_$$t.c \
	    $(FUZZ_BUILD)/libetacal-internal.a $(LDLIBS_ALL) || exit 1; \
	done; \
	for t in $(FUZZ_TARGETS); do \
	  mkdir -p $(FUZZ_BUILD)/corpus/$$t; \
	  echo "== fuzz $$t for $(FUZZ_SECONDS) s"; \
	  $(FUZZ_BUILD)/fuzz_$$t -max_total_time=$(FUZZ_SECONDS) -timeout=10 -rss_limit_mb=2048 -max_len=65536 \
	    -print_final_stats=1 -artifact_prefix=$(FUZZ_BUILD)/crash-$$t- \
	    $(FUZZ_BUILD)/corpus/$$t tests/fuzz/corpus/$$t tests/fuzz/regress/$$t 2>$(FUZZ_BUILD)/fuzz_$$t.log || \
	    { tail -60 $(FUZZ_BUILD)/fuzz_$$t.log; echo "FAIL fuzz $$t: see $(FUZZ_BUILD)/crash-$$t-*"; exit 1; }; \
	  grep -E "^stat::number_of_executed_units|^Done" $(FUZZ_BUILD)/fuzz_$$t.log | tr '\n' ' '; echo; \
	done

clean:
	rm -rf build build-asan build-fuzz
