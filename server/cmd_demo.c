/* weft demo: writes the invented data set that `make demo` trains on. The scenario is ours: a
 * regional marketplace for hobby electronics parts, where buyers buy parts from sellers, parts
 * fit each other and belong to categories, and a small ring of sellers sells the same narrow
 * set of counterfeit-prone parts to accounts that buy from nobody else.
 *
 * What is planted, so that a model has something real to learn:
 * - every buyer follows one hobby (sometimes two); a hobby has kits of part families that fit
 *   each other, and a purchase is a basket from one kit: a part, then parts that fit it;
 * - sellers specialise in one or two hobbies, bigger shops sell more, buyers prefer shops of
 *   their own region and buy a basket from one shop when it stocks the parts;
 * - the ring's sellers list a few of the same popular, counterfeit-prone parts (and a few
 *   ordinary ones as cover; some honest shops resell such parts too), are younger, cheaper and
 *   see more returns than most shops (overlapping distributions, not a rule), and share ring
 *   accounts: buyers that buy only from the ring. Real buyers buy from them too.
 * Only a share of the sellers carries an observed label (legit or suspicious); the rest are
 * left for prediction. planted.tsv holds the planted truth of every buyer and seller, for
 * checking predictions; training never reads it.
 *
 * Output is a function of the options alone: the same options write byte-identical files.
 * Only integer arithmetic and weft_rng draws decide anything (no libm), and every list is
 * written in an order fixed by the node ids. */
#include <errno.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>

#include "cmd.h"
#include "weft/alloc.h"
#include "weft/rng.h"

#define SUB "demo"
#define NAME_CAP 64

/* ---- the catalogue: hobbies, categories, part families, kits ---- */

enum { DRONES, ROBOTICS, RETRO, SYNTHS, HOME, HAM, WEARABLES, PRINTING, N_HOBBIES };
#define D (1u << DRONES)
#define R (1u << ROBOTICS)
#define C (1u << RETRO)
#define S (1u << SYNTHS)
#define H (1u << HOME)
#define M (1u << HAM)
#define W (1u << WEARABLES)
#define P (1u << PRINTING)

static const char *const hobby_names[N_HOBBIES] = {
    "drones", "robotics", "retro-computing", "synths", "home-automation", "ham-radio",
    "wearables", "3d-printing",
};
/* How many buyers and shops follow each hobby, relative to each other. */
static const unsigned hobby_weight[N_HOBBIES] = { 16, 16, 9, 10, 18, 7, 10, 14 };

enum {
    CAT_MCU, CAT_SENSORS, CAT_MOTORS, CAT_DRIVERS, CAT_POWER, CAT_DISPLAYS, CAT_AUDIO,
    CAT_RADIO, CAT_CONNECTORS, CAT_PASSIVES, CAT_PROTOTYPING, CAT_TOOLS, CAT_MECHANICAL,
    CAT_LIGHTING, CAT_CHIPS, CAT_PRINTER, N_CATEGORIES
};
static const char *const category_names[N_CATEGORIES] = {
    "microcontrollers", "sensors", "motors-and-servos", "motor-drivers", "batteries-and-power",
    "displays", "audio", "radio-modules", "connectors-and-cables", "passives", "prototyping",
    "tools", "mechanical", "leds-and-lighting", "chips-and-memory", "printer-parts",
};

enum { N_REGIONS = 4 };
static const char *const region_names[N_REGIONS] = { "north", "harbour", "valley", "uplands" };
/* Most of the ring ships from one region (a hint in the features, not a rule). */
#define RING_REGION 2

/* A family of parts: its variants become parts "part:<stem>-<variant>", the first the most
 * popular. hobbies is a mask of the hobbies that use it; 0 means every hobby (tools, cables,
 * passives: the extras any basket may hold). is_prone: often counterfeited, what the ring
 * lists. */
struct family {
    const char *stem;
    unsigned category;
    unsigned hobbies;
    bool is_prone;
    const char *variants;   /* separated by single spaces */
};

static const struct family families[] = {
    { "esp32-devkit", CAT_MCU, H | R | W, true, "v4 c3-mini s3-n8r8 s3-n16r8 wroom-32u pico-d4" },
    { "esp8266-board", CAT_MCU, H, true, "nodemcu-v3 d1-mini d1-mini-pro esp01s" },
    { "arduino-nano", CAT_MCU, R | S | W, true, "v3 every 33-iot ch340" },
    { "uno-board", CAT_MCU, R, true, "r3 r4-minima r4-wifi smd" },
    { "stm32-bluepill", CAT_MCU, R | D, true, "f103c8 f103cb" },
    { "stm32-blackpill", CAT_MCU, R, false, "f401cc f411ce" },
    { "rp2040-board", CAT_MCU, S | W | C, false, "pico pico-w zero tiny" },
    { "teensy-board", CAT_MCU, S, false, "4-0 4-1 lc" },
    { "attiny-chip", CAT_MCU, W, false, "85-dip 85-soic 1614 402" },
    { "flight-controller", CAT_MCU, D, true, "f405-v3 f722-aio h743-wing f411-whoop" },
    { "imu-module", CAT_SENSORS, D | R | W, true, "mpu6050 icm20948 bno055 lsm6ds3" },
    { "env-sensor", CAT_SENSORS, H, true, "bme280 bme680 bmp390 aht20 sht31" },
    { "ultrasonic-sensor", CAT_SENSORS, R, false, "hc-sr04 jsn-sr04t us-100" },
    { "gps-module", CAT_SENSORS, D | M, true, "neo-6m neo-m8n m10q bn-880" },
    { "presence-sensor", CAT_SENSORS, H, false, "hc-sr501 am312 ld2410-radar" },
    { "current-sensor", CAT_SENSORS, H | P, false, "ina219 ina226 acs712-20a" },
    { "tof-sensor", CAT_SENSORS, R | D, false, "vl53l0x vl53l1x tf-mini" },
    { "servo-sg90", CAT_MOTORS, R, false, "blue clone metal-gear mg90s" },
    { "servo-mg996r", CAT_MOTORS, R, false, "std clone 360-continuous" },
    { "brushless-motor", CAT_MOTORS, D, false,
      "2207-1950kv 2207-2750kv 1404-3800kv 2306-2450kv 0802-19000kv" },
    { "stepper-nema17", CAT_MOTORS, P | R, false, "40mm 48mm pancake-23mm 60mm" },
    { "n20-gearmotor", CAT_MOTORS, R, false, "100rpm 300rpm 600rpm encoder-300rpm" },
    { "esc", CAT_DRIVERS, D, false, "30a-single 45a-4in1 55a-4in1 20a-whoop" },
    { "stepper-driver", CAT_DRIVERS, P, true, "a4988 drv8825 tmc2209 tmc2208" },
    { "motor-driver", CAT_DRIVERS, R, false, "l298n tb6612fng drv8833 bts7960" },
    { "lipo-pack", CAT_POWER, D | R, true, "4s-1300 4s-1500 1s-450 6s-1100 3s-2200" },
    { "liion-cell", CAT_POWER, W | H | R, true, "18650-3000 18650-3500 21700-5000 14500-800" },
    { "buck-converter", CAT_POWER, R | H | D, true, "lm2596 mp1584 xl4015 mini-360" },
    { "charger-module", CAT_POWER, W | R, false, "tp4056-usbc tp4056-micro ip5306 bq24074" },
    { "eurorack-psu", CAT_POWER, S, false, "1a-kit 2a-kit busboard-8 busboard-16" },
    { "bench-psu", CAT_TOOLS, 0, false, "30v-5a 30v-10a usb-pd-trigger" },
    { "oled-display", CAT_DISPLAYS, W | H | S, false, "0-96-i2c 1-3-spi 0-91-i2c 2-42-spi" },
    { "tft-display", CAT_DISPLAYS, C | H, false, "ili9341-2-8 st7789-1-3 st7735-1-8 ili9488-3-5" },
    { "eink-display", CAT_DISPLAYS, H, false, "2-13 2-9 4-2 7-5" },
    { "lcd-character", CAT_DISPLAYS, C | H, false, "1602-i2c 2004-i2c 1602-parallel" },
    { "i2s-dac", CAT_AUDIO, S | C, false, "pcm5102a uda1334 max98357 es9023" },
    { "audio-amp", CAT_AUDIO, S | C, false, "pam8403 tpa3116 tda2030 lm386" },
    { "midi-jack", CAT_AUDIO, S, false, "din5-in din5-out trs-a trs-b" },
    { "potentiometer", CAT_PASSIVES, S, false, "10k-lin 100k-log 10k-log 50k-lin" },
    { "lora-module", CAT_RADIO, H | M, true, "sx1276-868 sx1262-915 ra-02 rfm95w" },
    { "nrf24-module", CAT_RADIO, H | R, true, "nrf24l01 nrf24l01-pa-lna" },
    { "sdr-dongle", CAT_RADIO, M, true, "rtl2832u-tcxo rtl2832u-v4 hf-upconverter" },
    { "camera-radio", CAT_RADIO, D, false, "band-low band-high compact" },
    { "rc-receiver", CAT_RADIO, D, false, "2g4-nano 900mhz-nano 2g4-diversity" },
    { "antenna", CAT_RADIO, M | D, false, "sma-2g4 sma-915 dipole-2m yagi-70cm" },
    { "xt60-connector", CAT_CONNECTORS, D, false, "pair pigtail-12awg y-harness" },
    { "jst-kit", CAT_CONNECTORS, W | D | R, false, "ph2-0-set sh1-0-set xh2-54-set" },
    { "jumper-wires", CAT_CONNECTORS, 0, false, "mm-40 mf-40 ff-40" },
    { "usb-cable", CAT_CONNECTORS, 0, false, "c-to-c-1m micro-1m a-to-c-2m" },
    { "coax-pigtail", CAT_CONNECTORS, M, false, "sma-ipex ufl-sma n-to-sma" },
    { "ribbon-cable", CAT_CONNECTORS, C | S, false, "idc-40 idc-34 idc-16 idc-10" },
    { "resistor-kit", CAT_PASSIVES, 0, false, "e12-600pc e24-1k 1206-smd" },
    { "capacitor-kit", CAT_PASSIVES, 0, false, "ceramic-300pc electrolytic-120pc tantalum-50pc" },
    { "crystal", CAT_PASSIVES, C, false, "16mhz 4mhz 8mhz 3-579545mhz" },
    { "breadboard", CAT_PROTOTYPING, 0, false, "830-point 400-point mini-170" },
    { "perfboard", CAT_PROTOTYPING, 0, false, "5x7 7x9 stripboard" },
    { "soldering-iron", CAT_TOOLS, 0, false, "usb-c-pen t12-station 60w-station" },
    { "multimeter", CAT_TOOLS, 0, false, "auto-ranging pocket clamp" },
    { "logic-analyzer", CAT_TOOLS, C, false, "8ch-24mhz 16ch-100mhz" },
    { "drone-frame", CAT_MECHANICAL, D, false,
      "5in-freestyle 3in-cinewhoop 7in-longrange 2in-toothpick" },
    { "propeller-set", CAT_MECHANICAL, D, false, "5in-tri 3in-duct 7in-bi 2in-quad" },
    { "robot-chassis", CAT_MECHANICAL, R, false, "2wd-acrylic 4wd-metal tank-track" },
    { "pan-tilt-bracket", CAT_MECHANICAL, R, false, "sg90 mg996r camera" },
    { "printer-mainboard", CAT_PRINTER, P, false, "skr-mini-e3 octopus-v1-1 manta-m8p robin-nano" },
    { "linear-rail", CAT_PRINTER, P, false, "mgn12h-300 mgn9h-250 v-slot-2020" },
    { "hotend", CAT_PRINTER, P, true, "v6-style volcano-style sprite-style" },
    { "nozzle-set", CAT_PRINTER, P, false, "brass-0-4 hardened-0-6 mixed-10pc" },
    { "print-bed", CAT_PRINTER, P, false, "pei-sheet-235 glass-220 magnetic-300" },
    { "filament", CAT_PRINTER, P, false, "pla-1kg petg-1kg tpu-500g asa-1kg" },
    { "ws2812-strip", CAT_LIGHTING, W | H, true, "60-per-m 144-per-m ring-16 matrix-8x8" },
    { "led-driver", CAT_LIGHTING, W | H, false, "pca9685 tlc5940 mosfet-4ch" },
    { "z80-cpu", CAT_CHIPS, C, false, "z84c0010 z84c0020 ctc sio" },
    { "6502-cpu", CAT_CHIPS, C, false, "w65c02 w65c22-via w65c51-acia" },
    { "eprom", CAT_CHIPS, C, true, "27c256 27c512 28c256-eeprom" },
    { "sram-chip", CAT_CHIPS, C, false, "62256 as6c4008 6116" },
    { "usb-serial-adapter", CAT_CHIPS, C | R, true, "ch340g cp2102 ft232rl" },
    { "sd-card", CAT_CHIPS, C | P | D, true, "32gb 64gb 128gb micro-16gb" },
};
#define N_FAMILIES (sizeof families / sizeof families[0])

/* A kit: families of one hobby whose parts fit each other; a basket comes from one kit. */
struct kit {
    unsigned hobby;
    const char *families;   /* stems separated by single spaces */
};

static const struct kit kits[] = {
    { DRONES, "flight-controller esc brushless-motor propeller-set drone-frame" },
    { DRONES, "lipo-pack xt60-connector esc" },
    { DRONES, "camera-radio antenna flight-controller" },
    { DRONES, "rc-receiver flight-controller antenna" },
    { DRONES, "gps-module flight-controller stm32-bluepill" },
    { ROBOTICS, "servo-sg90 pan-tilt-bracket arduino-nano" },
    { ROBOTICS, "servo-mg996r pan-tilt-bracket buck-converter" },
    { ROBOTICS, "motor-driver n20-gearmotor robot-chassis uno-board" },
    { ROBOTICS, "ultrasonic-sensor uno-board robot-chassis" },
    { ROBOTICS, "tof-sensor stm32-blackpill imu-module" },
    { ROBOTICS, "lipo-pack buck-converter motor-driver" },
    { ROBOTICS, "nrf24-module arduino-nano usb-serial-adapter" },
    { RETRO, "z80-cpu sram-chip eprom crystal" },
    { RETRO, "6502-cpu sram-chip eprom crystal" },
    { RETRO, "tft-display rp2040-board sd-card" },
    { RETRO, "usb-serial-adapter logic-analyzer ribbon-cable" },
    { RETRO, "lcd-character 6502-cpu" },
    { SYNTHS, "teensy-board i2s-dac audio-amp" },
    { SYNTHS, "midi-jack arduino-nano potentiometer" },
    { SYNTHS, "eurorack-psu ribbon-cable potentiometer" },
    { SYNTHS, "rp2040-board i2s-dac oled-display" },
    { HOME, "esp32-devkit env-sensor oled-display" },
    { HOME, "esp8266-board presence-sensor buck-converter" },
    { HOME, "lora-module esp32-devkit antenna" },
    { HOME, "eink-display esp32-devkit liion-cell" },
    { HOME, "current-sensor esp8266-board lcd-character" },
    { HOME, "ws2812-strip esp8266-board led-driver" },
    { HAM, "sdr-dongle coax-pigtail antenna" },
    { HAM, "lora-module coax-pigtail antenna" },
    { HAM, "gps-module lora-module" },
    { WEARABLES, "ws2812-strip attiny-chip liion-cell" },
    { WEARABLES, "charger-module liion-cell jst-kit" },
    { WEARABLES, "imu-module rp2040-board oled-display" },
    { PRINTING, "printer-mainboard stepper-driver stepper-nema17" },
    { PRINTING, "hotend nozzle-set filament" },
    { PRINTING, "print-bed filament" },
    { PRINTING, "linear-rail stepper-nema17 printer-mainboard" },
    { PRINTING, "sd-card printer-mainboard current-sensor" },
};
#define N_KITS (sizeof kits / sizeof kits[0])
#define KIT_MAX 6

/* Buyer and seller handles: words, never people's names. */
static const char *const handle_words[2][24] = {
    { "amber", "brisk", "cobalt", "copper", "dusty", "ember", "fern", "granite", "hazel",
      "indigo", "juniper", "kelp", "lichen", "maple", "nickel", "ochre", "pewter", "quartz",
      "russet", "slate", "tawny", "umber", "violet", "willow" },
    { "heron", "wren", "otter", "lynx", "marten", "plover", "badger", "finch", "stoat",
      "kestrel", "newt", "vole", "egret", "shrike", "dormouse", "gecko", "ibis", "jackdaw",
      "lapwing", "magpie", "osprey", "puffin", "siskin", "tern" },
};
static const char *const shop_words[2][32] = {
    { "northgate", "voltline", "pinhead", "solderbay", "copperleaf", "kiloohm", "bitforge",
      "ampere-lane", "fluxpoint", "gridlock", "hexnut", "ironclad", "junction", "keystone",
      "lowpass", "microfarad", "nibble", "overclock", "picofarad", "quickwire", "rivet",
      "sparkgap", "tinplate", "uplink", "vectorboard", "wattle", "crossbar", "yardarm",
      "zenerline", "breakout", "ceramic", "dipswitch" },
    { "components", "electronics", "supply", "parts", "trading", "depot", "labs", "workshop",
      "surplus", "store", "hobby-shop", "outlet", "warehouse", "exchange", "bench", "corner",
      "direct", "market", "emporium", "co" },
};
#define N_SHOP_SUFFIXES 20

/* Features (features.tsv), by index; each line lists the ones a node has. */
enum {
    F_TYPE = 0,            /* 4: buyer, seller, part, category */
    F_SELLER_AGE = 4,      /* 4: account under 3 months, 3-12 months, 1-3 years, over 3 years */
    F_UNDERPRICED = 8,     /* 3: share of listings priced under the market: low, medium, high */
    F_RETURNS = 11,        /* 3: returns per order: low, medium, high */
    F_REGION = 14,         /* 4: region (sellers ship from it, buyers live in it) */
    F_BUYER_AGE = 18,      /* 4: buyer account age, the same bands as sellers' */
    F_ORDERS = 22,         /* 3: parts bought: 1-3, 4-10, over 10 */
    F_CATEGORY = 25,       /* N_CATEGORIES: a part's category (and a category's own) */
};

/* Distributions of the seller and buyer attributes, as integer weights per band. */
static const unsigned legit_age[4] = { 8, 20, 34, 38 }, ring_age[4] = { 45, 35, 15, 5 };
static const unsigned legit_underpriced[3] = { 60, 30, 10 }, ring_underpriced[3] = { 15, 35, 50 };
static const unsigned legit_returns[3] = { 60, 30, 10 }, ring_returns[3] = { 20, 40, 40 };
static const unsigned buyer_age[4] = { 15, 25, 30, 30 }, ring_account_age[4] = { 60, 30, 8, 2 };
/* Baskets a real buyer fills: 1 to 6. */
static const unsigned basket_weight[6] = { 25, 28, 20, 13, 9, 5 };

/* Relations, in the order edges.tsv lists them. */
enum { REL_BOUGHT, REL_BOUGHT_FROM, REL_SELLS, REL_FITS, REL_IN_CATEGORY, N_RELATIONS };
static const char *const relation_names[N_RELATIONS] = {
    "bought", "bought_from", "sells", "fits", "in_category",
};

/* ---- options ---- */

typedef struct demo_opts {
    const char *out;
    uint64_t seed;
    uint64_t n_buyers, n_sellers, n_ring, n_ring_buyers;
    double labelled;
    bool is_help;
} demo_opts;

static const demo_opts demo_defaults = { NULL, 1, 2400, 600, 48, 90, 0.6, false };

static void print_usage(void)
{
    const demo_opts *d = &demo_defaults;
    printf("usage: weft demo --out DIR [options]\n"
           "\n"
           "Writes an invented data set to try weft on: a regional marketplace for hobby\n"
           "electronics parts. Buyers follow hobbies (drones, robotics, retro computing,\n"
           "synths, home automation, ham radio, wearables, 3D printing) and buy baskets of\n"
           "parts that fit each other; sellers list parts; a small ring of sellers lists the\n"
           "same counterfeit-prone parts and shares buyer accounts that buy from nobody else.\n"
           "A share of the sellers is labelled legit or suspicious; the rest are left for\n"
           "prediction. Everything in it is invented. The same options write byte-identical\n"
           "files.\n"
           "\n"
           "Files written to DIR (created if absent; existing files are replaced):\n"
           "  edges.tsv     source<TAB>relation<TAB>target: bought (buyer -> part),\n"
           "                bought_from (buyer -> seller), sells (seller -> part), fits\n"
           "                (part -> part), in_category (part -> category)\n"
           "  types.tsv     node<TAB>type: buyer, seller, part, category (for --types)\n"
           "  labels.tsv    seller<TAB>legit|suspicious for the labelled sellers (--labels)\n"
           "  split.tsv     seller<TAB>train|valid|test: each class's labelled sellers split\n"
           "                50/15/35 (--split)\n"
           "  features.tsv  node<TAB>index ... (for --features; README.txt lists the indices)\n"
           "  planted.tsv   the planted truth: every buyer's hobby (or ring-account), every\n"
           "                seller's class; for checking predictions, never for training\n"
           "  examples.tsv  what<TAB>node: the buyer, part and seller the demo's queries use\n"
           "  README.txt    the scenario, the files and the sizes\n"
           "\n"
           "options:\n"
           "  --out DIR          output directory (required)\n"
           "  --seed S           seed of every random choice (default %llu)\n"
           "  --buyers N         buyers, the ring accounts included (default %llu)\n"
           "  --sellers N        sellers, the ring included (default %llu)\n"
           "  --ring N           sellers in the suspicious ring (default %llu)\n"
           "  --ring-buyers N    buyer accounts that buy only from the ring (default %llu)\n"
           "  --labelled X       share of sellers with an observed label (default %g)\n"
           "  --help             print this help\n"
           "\n"
           "The labels are invented too. On real data, a predicted label about a seller is a\n"
           "probabilistic guess to be reviewed by a person; local law and data-protection\n"
           "rules decide what may be done with it.\n",
           (unsigned long long)d->seed, (unsigned long long)d->n_buyers,
           (unsigned long long)d->n_sellers, (unsigned long long)d->n_ring,
           (unsigned long long)d->n_ring_buyers, d->labelled);
}

/* Returns CMD_OK (then see o->is_help) or CMD_USAGE after printing the problem. */
static int parse_args(int argc, char **argv, demo_opts *o)
{
    for (int i = 1; i < argc; i++) {
        bool bad = false;
        const char *v;
        if (!strcmp(argv[i], "--help") || !strcmp(argv[i], "-h")) {
            o->is_help = true;
            return CMD_OK;
        }
        if ((v = cmd_opt_value(SUB, argc, argv, &i, "--out", &bad)))
            o->out = v;
        else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--seed", &bad))) {
            if (!cmd_parse_u64(SUB, "--seed", v, 0, UINT64_MAX, &o->seed))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--buyers", &bad))) {
            if (!cmd_parse_u64(SUB, "--buyers", v, 1, 1000000, &o->n_buyers))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--sellers", &bad))) {
            if (!cmd_parse_u64(SUB, "--sellers", v, 1, 100000, &o->n_sellers))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--ring", &bad))) {
            if (!cmd_parse_u64(SUB, "--ring", v, 0, 100000, &o->n_ring))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--ring-buyers", &bad))) {
            if (!cmd_parse_u64(SUB, "--ring-buyers", v, 0, 1000000, &o->n_ring_buyers))
                return CMD_USAGE;
        } else if ((v = cmd_opt_value(SUB, argc, argv, &i, "--labelled", &bad))) {
            if (!cmd_parse_double(SUB, "--labelled", v, 0, 1, &o->labelled))
                return CMD_USAGE;
        } else if (bad)
            return CMD_USAGE;
        else
            return cmd_usage_error(SUB, "unknown option '%s'", argv[i]);
        if (bad)
            return CMD_USAGE;
    }
    if (!o->out)
        return cmd_usage_error(SUB, "--out DIR is required");
    if (o->n_ring >= o->n_sellers)
        return cmd_usage_error(SUB, "--ring (%llu) must be below --sellers (%llu)",
                               (unsigned long long)o->n_ring, (unsigned long long)o->n_sellers);
    if (o->n_ring_buyers >= o->n_buyers)
        return cmd_usage_error(SUB, "--ring-buyers (%llu) must be below --buyers (%llu)",
                               (unsigned long long)o->n_ring_buyers,
                               (unsigned long long)o->n_buyers);
    if (o->n_ring_buyers > 0 && o->n_ring == 0)
        return cmd_usage_error(SUB, "--ring-buyers needs a ring (--ring above 0)");
    return CMD_OK;
}

/* ---- the generated market ---- */

struct part {
    uint32_t family;
    uint32_t rank;          /* variant index in its family: 0 is the most popular */
};

/* Where a labelled seller goes in split.tsv. */
enum { PART_TRAIN, PART_VALID, PART_TEST, N_PARTS };
static const char *const part_names[N_PARTS] = { "train", "valid", "test" };

struct seller {
    bool is_ring;
    bool is_labelled;
    unsigned part;          /* of a labelled seller: PART_* */
    unsigned hobbies;       /* mask; the ring's is 0 */
    unsigned region;
    uint32_t weight;        /* how often buyers pick it among the shops that list a part */
    unsigned age, underpriced, returns;   /* feature bands */
};

struct buyer {
    bool is_ring_account;
    unsigned hobby, hobby2;   /* hobby2 == hobby: one hobby */
    unsigned region, age;
    uint32_t n_bought;
};

struct edge {
    uint32_t rel, source, target;
};

/* Node ids: categories, then parts, sellers and buyers, each block in creation order. */
struct market {
    const demo_opts *o;
    weft_rng rng;
    struct part *parts;
    size_t n_parts;
    uint32_t family_first[N_FAMILIES + 1];   /* parts of family f: [first[f], first[f + 1]) */
    struct seller *sellers;
    struct buyer *buyers;
    size_t n_sellers, n_buyers;
    char (*names)[NAME_CAP];
    size_t n_nodes;
    uint8_t *stock;         /* (n_sellers, n_parts): 1 when the seller lists the part */
    uint32_t kit_families[N_KITS][KIT_MAX];
    size_t kit_size[N_KITS];
    struct edge *edges;
    size_t n_edges, cap_edges;
    uint32_t *fits_off, *fits_adj;       /* fits in both directions, CSR by part */
    uint32_t *seller_off, *seller_adj;   /* the sellers listing each part, CSR by part */
    uint32_t *ring_parts;   /* the parts the ring lists */
    size_t n_ring_parts;
};

static uint32_t node_category(unsigned c)
{
    return (uint32_t)c;
}

static uint32_t node_part(const struct market *m, size_t p)
{
    (void)m;
    return (uint32_t)(N_CATEGORIES + p);
}

static uint32_t node_seller(const struct market *m, size_t s)
{
    return (uint32_t)(N_CATEGORIES + m->n_parts + s);
}

static uint32_t node_buyer(const struct market *m, size_t b)
{
    return (uint32_t)(N_CATEGORIES + m->n_parts + m->n_sellers + b);
}

static bool chance(weft_rng *rng, unsigned percent)
{
    return weft_rng_below(rng, 100) < percent;
}

/* An index drawn with probability proportional to w[i] (the sum must be above 0). */
static size_t pick_weighted(weft_rng *rng, const unsigned *w, size_t n)
{
    uint64_t total = 0;
    for (size_t i = 0; i < n; i++)
        total += w[i];
    uint64_t x = weft_rng_next(rng) % total;   /* totals are tiny: the bias is negligible */
    for (size_t i = 0; i < n; i++) {
        if (x < w[i])
            return i;
        x -= w[i];
    }
    return n - 1;
}

/* Popularity of the variant of rank r: 12, 6, 4, 3, 2, ... (about 12 / (r + 1)). */
static unsigned rank_weight(uint32_t r)
{
    unsigned w = 12u / (r + 1u);
    return w ? w : 1u;
}

/* A part of family f, the popular variants more often. */
static uint32_t pick_variant(struct market *m, size_t f)
{
    uint32_t first = m->family_first[f], n = m->family_first[f + 1] - first;
    unsigned w[16];
    for (uint32_t r = 0; r < n; r++)
        w[r] = rank_weight(r);
    return first + (uint32_t)pick_weighted(&m->rng, w, n);
}

static bool family_in(const struct family *f, unsigned hobbies)
{
    return f->hobbies == 0 || (f->hobbies & hobbies) != 0;
}

static weft_err add_edge(struct market *m, uint32_t rel, uint32_t source, uint32_t target,
                         weft_error *err)
{
    if (weft_grow_array((void **)&m->edges, &m->cap_edges, m->n_edges + 1, sizeof *m->edges))
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's edges");
    m->edges[m->n_edges++] = (struct edge){ rel, source, target };
    return WEFT_OK;
}

/* The index of the family named @p stem (length n) in families[]. */
static bool find_family(const char *stem, size_t n, uint32_t *out)
{
    for (size_t f = 0; f < N_FAMILIES; f++)
        if (strlen(families[f].stem) == n && !strncmp(families[f].stem, stem, n)) {
            *out = (uint32_t)f;
            return true;
        }
    return false;
}

/* Parts from the families' variant lists, and the kits' family indices. */
static weft_err build_catalogue(struct market *m, weft_error *err)
{
    size_t n = 0;
    for (size_t f = 0; f < N_FAMILIES; f++)
        for (const char *v = families[f].variants; v; v = strchr(v + 1, ' '))
            n++;
    m->parts = weft_alloc_array(n, sizeof *m->parts);
    if (!m->parts)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's parts");
    for (size_t f = 0; f < N_FAMILIES; f++) {
        m->family_first[f] = (uint32_t)m->n_parts;
        uint32_t r = 0;
        for (const char *v = families[f].variants; v; v = strchr(v + 1, ' '))
            m->parts[m->n_parts++] = (struct part){ (uint32_t)f, r++ };
        if (r > 16)
            return weft_error_set(err, WEFT_ERR_INVALID, "demo: family %s has over 16 variants",
                                  families[f].stem);
    }
    m->family_first[N_FAMILIES] = (uint32_t)m->n_parts;
    for (size_t k = 0; k < N_KITS; k++) {
        const char *s = kits[k].families;
        while (*s) {
            size_t len = strcspn(s, " ");
            uint32_t f;
            if (m->kit_size[k] == KIT_MAX || !find_family(s, len, &f))
                return weft_error_set(err, WEFT_ERR_INVALID, "demo: bad kit '%s'",
                                      kits[k].families);
            m->kit_families[k][m->kit_size[k]++] = f;
            s += len + (s[len] == ' ');
        }
    }
    return WEFT_OK;
}

/* Node names; sellers' handles are a shuffled pairing of shop words. */
static void name_nodes(struct market *m, uint32_t *pairs)
{
    for (unsigned c = 0; c < N_CATEGORIES; c++)
        snprintf(m->names[node_category(c)], NAME_CAP, "cat:%s", category_names[c]);
    for (size_t p = 0; p < m->n_parts; p++) {
        const struct family *f = &families[m->parts[p].family];
        const char *v = f->variants;
        for (uint32_t r = 0; r < m->parts[p].rank; r++)
            v = strchr(v, ' ') + 1;
        int len = (int)strcspn(v, " ");
        snprintf(m->names[node_part(m, p)], NAME_CAP, "part:%s-%.*s", f->stem, len, v);
    }
    size_t n_pairs = 32 * N_SHOP_SUFFIXES;
    for (size_t i = 0; i < n_pairs; i++)
        pairs[i] = (uint32_t)i;
    for (size_t i = n_pairs - 1; i > 0; i--) {
        size_t j = weft_rng_below(&m->rng, (uint32_t)(i + 1));
        uint32_t t = pairs[i];
        pairs[i] = pairs[j];
        pairs[j] = t;
    }
    for (size_t s = 0; s < m->n_sellers; s++) {
        uint32_t k = pairs[s % n_pairs];
        size_t round = s / n_pairs;
        char *name = m->names[node_seller(m, s)];
        int len = snprintf(name, NAME_CAP, "seller:%s-%s", shop_words[0][k / N_SHOP_SUFFIXES],
                           shop_words[1][k % N_SHOP_SUFFIXES]);
        if (round > 0)
            snprintf(name + len, NAME_CAP - (size_t)len, "-%zu", round + 1);
    }
    for (size_t b = 0; b < m->n_buyers; b++)
        snprintf(m->names[node_buyer(m, b)], NAME_CAP, "buyer:%s-%s-%04zu",
                 handle_words[0][weft_rng_below(&m->rng, 24)],
                 handle_words[1][weft_rng_below(&m->rng, 24)], b);
}

/* "A fits B" between the parts of every two families of a kit: each part fits the variant of
 * the same rank (modulo the other family's size) and, half the time, one more. */
static weft_err plant_fits(struct market *m, weft_error *err)
{
    for (size_t k = 0; k < N_KITS; k++)
        for (size_t i = 0; i < m->kit_size[k]; i++)
            for (size_t j = i + 1; j < m->kit_size[k]; j++) {
                uint32_t a = m->kit_families[k][i], b = m->kit_families[k][j];
                uint32_t nb = m->family_first[b + 1] - m->family_first[b];
                for (uint32_t p = m->family_first[a]; p < m->family_first[a + 1]; p++) {
                    uint32_t q = m->family_first[b] + m->parts[p].rank % nb;
                    weft_err rc = add_edge(m, REL_FITS, node_part(m, p), node_part(m, q), err);
                    if (rc == WEFT_OK && chance(&m->rng, 50))
                        rc = add_edge(m, REL_FITS, node_part(m, p),
                                      node_part(m, pick_variant(m, b)), err);
                    if (rc != WEFT_OK)
                        return rc;
                }
            }
    return WEFT_OK;
}

/* CSR over parts of the edges of relation @p rel whose endpoints are parts or, for sells,
 * sellers: for fits both directions (neighbour parts), for sells the listing sellers. */
static weft_err part_csr(const struct market *m, uint32_t rel, uint32_t **off_out,
                         uint32_t **adj_out, weft_error *err)
{
    uint32_t base = node_part(m, 0);
    uint32_t *off = weft_calloc_array(m->n_parts + 1, sizeof *off), *adj = NULL;
    size_t n = 0;
    for (size_t e = 0; e < m->n_edges; e++)
        n += m->edges[e].rel == rel ? (rel == REL_FITS ? 2 : 1) : 0;
    adj = weft_alloc_array(n, sizeof *adj);
    if (!off || !adj) {
        free(off);
        free(adj);
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's adjacency");
    }
    for (size_t e = 0; e < m->n_edges; e++) {
        const struct edge *x = &m->edges[e];
        if (x->rel != rel)
            continue;
        off[x->target - base + 1]++;
        if (rel == REL_FITS)
            off[x->source - base + 1]++;
    }
    for (size_t p = 0; p < m->n_parts; p++)
        off[p + 1] += off[p];
    for (size_t e = 0; e < m->n_edges; e++) {   /* fill, then restore the offsets */
        const struct edge *x = &m->edges[e];
        if (x->rel != rel)
            continue;
        if (rel == REL_FITS) {
            adj[off[x->target - base]++] = x->source - base;
            adj[off[x->source - base]++] = x->target - base;
        } else
            adj[off[x->target - base]++] = x->source - node_seller(m, 0);
    }
    for (size_t p = m->n_parts; p > 0; p--)
        off[p] = off[p - 1];
    off[0] = 0;
    *off_out = off;
    *adj_out = adj;
    return WEFT_OK;
}

static weft_err list_part(struct market *m, size_t s, uint32_t p, weft_error *err)
{
    uint8_t *cell = &m->stock[s * m->n_parts + p];
    if (*cell)
        return WEFT_OK;
    *cell = 1;
    m->sellers[s].weight++;
    return add_edge(m, REL_SELLS, node_seller(m, s), node_part(m, p), err);
}

/* The families a shop or a basket of these hobbies draws from (every-hobby ones included). */
static size_t families_of(unsigned hobbies, uint32_t *out)
{
    size_t n = 0;
    for (size_t f = 0; f < N_FAMILIES; f++)
        if (family_in(&families[f], hobbies))
            out[n++] = (uint32_t)f;
    return n;
}

static size_t generic_families(uint32_t *out)
{
    size_t n = 0;
    for (size_t f = 0; f < N_FAMILIES; f++)
        if (families[f].hobbies == 0)
            out[n++] = (uint32_t)f;
    return n;
}

static size_t prone_families(uint32_t *out)
{
    size_t n = 0;
    for (size_t f = 0; f < N_FAMILIES; f++)
        if (families[f].is_prone)
            out[n++] = (uint32_t)f;
    return n;
}

static weft_err stock_legit(struct market *m, size_t s, weft_error *err)
{
    struct seller *x = &m->sellers[s];
    unsigned h1 = (unsigned)pick_weighted(&m->rng, hobby_weight, N_HOBBIES);
    x->hobbies = 1u << h1;
    if (chance(&m->rng, 30))
        x->hobbies |= 1u << pick_weighted(&m->rng, hobby_weight, N_HOBBIES);
    x->region = weft_rng_below(&m->rng, N_REGIONS);
    x->age = (unsigned)pick_weighted(&m->rng, legit_age, 4);
    x->underpriced = (unsigned)pick_weighted(&m->rng, legit_underpriced, 3);
    x->returns = (unsigned)pick_weighted(&m->rng, legit_returns, 3);
    size_t size = chance(&m->rng, 10) ? 40 + weft_rng_below(&m->rng, 40)
                                      : 6 + weft_rng_below(&m->rng, 18);
    uint32_t fam[N_FAMILIES];
    size_t n_fam = families_of(x->hobbies, fam);
    if (chance(&m->rng, 3))   /* a module reseller: the ring's kind of parts, honestly sold */
        n_fam = prone_families(fam);
    weft_err rc = WEFT_OK;
    for (size_t tries = 0; rc == WEFT_OK && x->weight < size && tries < 8 * size; tries++)
        rc = list_part(m, s, pick_variant(m, fam[weft_rng_below(&m->rng, (uint32_t)n_fam)]), err);
    return rc;
}

/* A ring seller: a handful of the ring's counterfeit-prone parts, and as cover a few ordinary
 * parts of one hobby and maybe a generic one. */
static weft_err stock_ring(struct market *m, size_t s, weft_error *err)
{
    struct seller *x = &m->sellers[s];
    x->region = chance(&m->rng, 70) ? RING_REGION : weft_rng_below(&m->rng, N_REGIONS);
    x->age = (unsigned)pick_weighted(&m->rng, ring_age, 4);
    x->underpriced = (unsigned)pick_weighted(&m->rng, ring_underpriced, 3);
    x->returns = (unsigned)pick_weighted(&m->rng, ring_returns, 3);
    size_t want = 4 + weft_rng_below(&m->rng, 5);
    weft_err rc = WEFT_OK;
    for (size_t tries = 0; rc == WEFT_OK && x->weight < want && tries < 8 * want; tries++)
        rc = list_part(m, s, m->ring_parts[weft_rng_below(&m->rng, (uint32_t)m->n_ring_parts)],
                       err);
    uint32_t fam[N_FAMILIES];
    size_t n_fam = families_of(1u << pick_weighted(&m->rng, hobby_weight, N_HOBBIES), fam);
    size_t cover = 1 + weft_rng_below(&m->rng, 4);
    for (size_t i = 0; rc == WEFT_OK && i < cover; i++)
        rc = list_part(m, s, pick_variant(m, fam[weft_rng_below(&m->rng, (uint32_t)n_fam)]), err);
    x->weight = 10;   /* cheap listings draw some real buyers, like a small shop */
    return rc;
}

/* The ring lists the two most popular variants of the counterfeit-prone families, 14 of them. */
static weft_err choose_ring_parts(struct market *m, weft_error *err)
{
    m->ring_parts = weft_alloc_array(m->n_parts, sizeof *m->ring_parts);
    if (!m->ring_parts)
        return weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's ring");
    size_t n = 0;
    for (size_t p = 0; p < m->n_parts; p++)
        if (families[m->parts[p].family].is_prone && m->parts[p].rank < 2)
            m->ring_parts[n++] = (uint32_t)p;
    for (size_t i = 0; i < n && i < 14; i++) {
        size_t j = i + weft_rng_below(&m->rng, (uint32_t)(n - i));
        uint32_t t = m->ring_parts[i];
        m->ring_parts[i] = m->ring_parts[j];
        m->ring_parts[j] = t;
    }
    m->n_ring_parts = n < 14 ? n : 14;
    return WEFT_OK;
}

/* The labelled sellers of one class, shuffled: half for training, 15 % for validation, the
 * rest (35 %) for testing, so that each part holds both classes in their proportions. */
static void split_labelled(struct market *m, bool is_ring, uint32_t *idx)
{
    size_t n = 0;
    for (size_t s = 0; s < m->n_sellers; s++)
        if (m->sellers[s].is_labelled && m->sellers[s].is_ring == is_ring)
            idx[n++] = (uint32_t)s;
    for (size_t i = n; i > 1; i--) {
        size_t j = weft_rng_below(&m->rng, (uint32_t)i);
        uint32_t t = idx[i - 1];
        idx[i - 1] = idx[j];
        idx[j] = t;
    }
    size_t n_train = n * 50 / 100, n_valid = n * 15 / 100;
    for (size_t i = 0; i < n; i++)
        m->sellers[idx[i]].part = i < n_train ? PART_TRAIN
                                  : i < n_train + n_valid ? PART_VALID : PART_TEST;
}

static weft_err plant_sellers(struct market *m, uint32_t *scratch, weft_error *err)
{
    weft_rng_sample(&m->rng, scratch, m->n_sellers, m->o->n_ring);
    for (size_t i = 0; i < m->o->n_ring; i++)
        m->sellers[scratch[i]].is_ring = true;
    weft_err rc = choose_ring_parts(m, err);
    for (size_t s = 0; rc == WEFT_OK && s < m->n_sellers; s++)
        rc = m->sellers[s].is_ring ? stock_ring(m, s, err) : stock_legit(m, s, err);
    /* every part is listed by at least one shop of a hobby that uses it */
    for (size_t p = 0; rc == WEFT_OK && p < m->n_parts; p++) {
        bool listed = false;
        for (size_t s = 0; s < m->n_sellers && !listed; s++)
            listed = m->stock[s * m->n_parts + p];
        if (listed)
            continue;
        size_t best = m->n_sellers;
        for (size_t tries = 0; tries < 200 && best == m->n_sellers; tries++) {
            size_t s = weft_rng_below(&m->rng, (uint32_t)m->n_sellers);
            if (!m->sellers[s].is_ring && family_in(&families[m->parts[p].family],
                                                    m->sellers[s].hobbies))
                best = s;
        }
        for (size_t s = 0; s < m->n_sellers && best == m->n_sellers; s++)
            if (!m->sellers[s].is_ring)
                best = s;
        rc = list_part(m, best, (uint32_t)p, err);
    }
    for (size_t s = 0; rc == WEFT_OK && s < m->n_sellers; s++)
        m->sellers[s].is_labelled = weft_rng_double(&m->rng) < m->o->labelled;
    if (rc == WEFT_OK) {
        split_labelled(m, false, scratch);
        split_labelled(m, true, scratch);
    }
    return rc;
}

/* The shop a buyer takes part @p p from: the basket's shop when it lists the part (mostly),
 * else one of the part's shops, bigger ones and those of the buyer's region more often. */
static uint32_t pick_shop(struct market *m, const struct buyer *b, uint32_t p, uint32_t shop,
                          unsigned *w)
{
    if (shop != UINT32_MAX && m->stock[shop * m->n_parts + p] && chance(&m->rng, 75))
        return shop;
    uint32_t first = m->seller_off[p], n = m->seller_off[p + 1] - first;
    for (uint32_t i = 0; i < n; i++) {
        const struct seller *x = &m->sellers[m->seller_adj[first + i]];
        w[i] = x->weight * (x->region == b->region ? 3u : 1u);
    }
    return m->seller_adj[first + pick_weighted(&m->rng, w, n)];
}

/* A part of family @p f that fits @p seed, when one does; else a popular variant. */
static uint32_t pick_fitting(struct market *m, uint32_t seed, uint32_t f)
{
    uint32_t cand[64];
    size_t n = 0;
    for (uint32_t i = m->fits_off[seed]; i < m->fits_off[seed + 1] && n < 64; i++) {
        uint32_t q = m->fits_adj[i];
        if (m->parts[q].family == f)
            cand[n++] = q;
    }
    return n ? cand[weft_rng_below(&m->rng, (uint32_t)n)] : pick_variant(m, f);
}

static weft_err buy(struct market *m, size_t b, uint32_t p, uint32_t seller, weft_error *err)
{
    m->buyers[b].n_bought++;
    weft_err rc = add_edge(m, REL_BOUGHT, node_buyer(m, b), node_part(m, p), err);
    return rc == WEFT_OK ? add_edge(m, REL_BOUGHT_FROM, node_buyer(m, b), node_seller(m, seller),
                                    err)
                         : rc;
}

/* A hobbyist's baskets: each from one kit of a hobby, a part and parts that fit it, maybe an
 * extra (a tool, a cable), mostly from one shop. */
static weft_err shop_real(struct market *m, size_t b, unsigned *w, weft_error *err)
{
    struct buyer *x = &m->buyers[b];
    x->hobby = (unsigned)pick_weighted(&m->rng, hobby_weight, N_HOBBIES);
    x->hobby2 = chance(&m->rng, 25) ? (unsigned)pick_weighted(&m->rng, hobby_weight, N_HOBBIES)
                                    : x->hobby;
    x->region = weft_rng_below(&m->rng, N_REGIONS);
    x->age = (unsigned)pick_weighted(&m->rng, buyer_age, 4);
    uint32_t generic[N_FAMILIES];
    size_t n_generic = generic_families(generic);
    size_t n_baskets = 1 + pick_weighted(&m->rng, basket_weight, 6);
    for (size_t k = 0; k < n_baskets; k++) {
        unsigned hobby = chance(&m->rng, 30) ? x->hobby2 : x->hobby;
        uint32_t mine[N_KITS];
        size_t n_mine = 0;
        for (size_t i = 0; i < N_KITS; i++)
            if (kits[i].hobby == hobby)
                mine[n_mine++] = (uint32_t)i;
        uint32_t kit = mine[weft_rng_below(&m->rng, (uint32_t)n_mine)];
        size_t size = m->kit_size[kit], first = weft_rng_below(&m->rng, (uint32_t)size);
        uint32_t items[KIT_MAX + 1];
        size_t n = 0;
        uint32_t seed = pick_variant(m, m->kit_families[kit][first]);
        items[n++] = seed;
        for (size_t i = 0; i < size; i++)
            if (i != first && chance(&m->rng, 60))
                items[n++] = pick_fitting(m, seed, m->kit_families[kit][i]);
        if (chance(&m->rng, 35))
            items[n++] = pick_variant(m, generic[weft_rng_below(&m->rng, (uint32_t)n_generic)]);
        uint32_t shop = UINT32_MAX;
        for (size_t i = 0; i < n; i++) {
            shop = pick_shop(m, x, items[i], shop, w);
            weft_err rc = buy(m, b, items[i], shop, err);
            if (rc != WEFT_OK)
                return rc;
        }
    }
    return WEFT_OK;
}

/* A ring account: young, mostly in the ring's region, buys a few of the ring's parts from two
 * to four ring sellers and from nobody else. */
static weft_err shop_ring_account(struct market *m, size_t b, uint32_t *ring, size_t n_ring,
                                  weft_error *err)
{
    struct buyer *x = &m->buyers[b];
    x->hobby = x->hobby2 = N_HOBBIES;
    x->region = chance(&m->rng, 60) ? RING_REGION : weft_rng_below(&m->rng, N_REGIONS);
    x->age = (unsigned)pick_weighted(&m->rng, ring_account_age, 4);
    size_t k = 2 + weft_rng_below(&m->rng, 3);
    k = k < n_ring ? k : n_ring;
    uint32_t mine[4];
    for (size_t i = 0; i < k; i++) {   /* k distinct ring sellers: a partial shuffle of ring */
        size_t j = i + weft_rng_below(&m->rng, (uint32_t)(n_ring - i));
        uint32_t t = ring[i];
        ring[i] = ring[j];
        ring[j] = t;
        mine[i] = ring[i];
    }
    size_t n_items = 3 + weft_rng_below(&m->rng, 5);
    for (size_t i = 0; i < n_items; i++) {
        uint32_t s = mine[weft_rng_below(&m->rng, (uint32_t)k)];
        uint32_t listed[64];
        size_t n = 0;
        for (size_t j = 0; j < m->n_ring_parts && n < 64; j++)
            if (m->stock[s * m->n_parts + m->ring_parts[j]])
                listed[n++] = m->ring_parts[j];
        if (n == 0)
            continue;
        weft_err rc = buy(m, b, listed[weft_rng_below(&m->rng, (uint32_t)n)], s, err);
        if (rc != WEFT_OK)
            return rc;
    }
    return WEFT_OK;
}

static weft_err plant_buyers(struct market *m, uint32_t *scratch, weft_error *err)
{
    weft_err rc = part_csr(m, REL_FITS, &m->fits_off, &m->fits_adj, err);
    if (rc == WEFT_OK)
        rc = part_csr(m, REL_SELLS, &m->seller_off, &m->seller_adj, err);
    unsigned *w = weft_alloc_array(m->n_sellers, sizeof *w);
    uint32_t *ring = weft_alloc_array(m->n_sellers, sizeof *ring);
    if (rc == WEFT_OK && (!w || !ring))
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's buyers");
    size_t n_ring = 0;
    for (size_t s = 0; rc == WEFT_OK && s < m->n_sellers; s++)
        if (m->sellers[s].is_ring)
            ring[n_ring++] = (uint32_t)s;
    if (rc == WEFT_OK) {
        weft_rng_sample(&m->rng, scratch, m->n_buyers, m->o->n_ring_buyers);
        for (size_t i = 0; i < m->o->n_ring_buyers; i++)
            m->buyers[scratch[i]].is_ring_account = true;
    }
    for (size_t b = 0; rc == WEFT_OK && b < m->n_buyers; b++)
        rc = m->buyers[b].is_ring_account ? shop_ring_account(m, b, ring, n_ring, err)
                                          : shop_real(m, b, w, err);
    free(w);
    free(ring);
    return rc;
}

static int edge_cmp(const void *a, const void *b)
{
    const struct edge *x = a, *y = b;
    if (x->rel != y->rel)
        return x->rel < y->rel ? -1 : 1;
    if (x->source != y->source)
        return x->source < y->source ? -1 : 1;
    return x->target < y->target ? -1 : x->target > y->target;
}

/* Sorts the edges by relation, source and target, and drops repeats (a buyer who bought a
 * part twice, or from one shop twice, has one edge). */
static void dedup_edges(struct market *m)
{
    qsort(m->edges, m->n_edges, sizeof *m->edges, edge_cmp);
    size_t n = 0;
    for (size_t e = 0; e < m->n_edges; e++)
        if (n == 0 || edge_cmp(&m->edges[n - 1], &m->edges[e]) != 0)
            m->edges[n++] = m->edges[e];
    m->n_edges = n;
}

static weft_err generate(struct market *m, weft_error *err)
{
    weft_rng_seed(&m->rng, m->o->seed);
    m->n_sellers = m->o->n_sellers;
    m->n_buyers = m->o->n_buyers;
    weft_err rc = build_catalogue(m, err);
    if (rc != WEFT_OK)
        return rc;
    m->n_nodes = N_CATEGORIES + m->n_parts + m->n_sellers + m->n_buyers;
    size_t n_scratch = m->n_buyers > 32 * N_SHOP_SUFFIXES ? m->n_buyers : 32 * N_SHOP_SUFFIXES;
    uint32_t *scratch = weft_alloc_array(n_scratch > m->n_sellers ? n_scratch : m->n_sellers,
                                         sizeof *scratch);
    m->sellers = weft_calloc_array(m->n_sellers, sizeof *m->sellers);
    m->buyers = weft_calloc_array(m->n_buyers, sizeof *m->buyers);
    m->names = weft_alloc_array(m->n_nodes, sizeof *m->names);
    m->stock = weft_calloc_array(m->n_sellers, m->n_parts);
    if (!scratch || !m->sellers || !m->buyers || !m->names || !m->stock)
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's market");
    for (size_t p = 0; rc == WEFT_OK && p < m->n_parts; p++)
        rc = add_edge(m, REL_IN_CATEGORY, node_part(m, p),
                      node_category(families[m->parts[p].family].category), err);
    if (rc == WEFT_OK)
        rc = plant_fits(m, err);
    if (rc == WEFT_OK)
        rc = plant_sellers(m, scratch, err);
    if (rc == WEFT_OK) {
        dedup_edges(m);   /* the fits and sells lists buyers draw from, without repeats */
        rc = plant_buyers(m, scratch, err);
    }
    if (rc == WEFT_OK) {
        name_nodes(m, scratch);
        dedup_edges(m);
    }
    free(scratch);
    return rc;
}

static void market_fini(struct market *m)
{
    free(m->parts);
    free(m->sellers);
    free(m->buyers);
    free(m->names);
    free(m->stock);
    free(m->edges);
    free(m->fits_off);
    free(m->fits_adj);
    free(m->seller_off);
    free(m->seller_adj);
    free(m->ring_parts);
}

/* ---- examples for the demo's queries ---- */

/* The nodes deploy/demo.sh asks about: a drone hobbyist with a few purchases; a part they have
 * not bought that fits at least two parts they did, the most bought such part (a likely
 * recommendation, to explain); and the unlabelled ring seller with the most ring accounts
 * among its buyers (the ring's clearest case). */
struct examples {
    uint32_t buyer, part, seller;
    bool has_buyer;
};

/* The part to explain for the buyer whose bought edges are [e, end), or UINT32_MAX. @p mine
 * and @p fits are zeroed scratch of n_parts cells, zeroed again on return. */
static uint32_t part_to_explain(const struct market *m, size_t e, size_t end,
                                const uint32_t *degree, uint8_t *mine, uint32_t *fits)
{
    uint32_t part0 = node_part(m, 0), best = UINT32_MAX;
    for (size_t i = e; i < end; i++)
        mine[m->edges[i].target - part0] = 1;
    for (size_t i = e; i < end; i++) {
        uint32_t p = m->edges[i].target - part0;
        for (uint32_t j = m->fits_off[p]; j < m->fits_off[p + 1]; j++)
            fits[m->fits_adj[j]]++;
    }
    for (uint32_t p = 0; p < m->n_parts; p++)
        if (!mine[p] && fits[p] >= 2 && (best == UINT32_MAX || degree[p] > degree[best]))
            best = p;
    memset(mine, 0, m->n_parts);
    memset(fits, 0, m->n_parts * sizeof *fits);
    return best;
}

/* The seller to show; @p accounts is zeroed scratch of n_sellers cells. */
static uint32_t seller_to_show(const struct market *m, uint32_t *accounts)
{
    for (size_t e = 0; e < m->n_edges; e++)
        if (m->edges[e].rel == REL_BOUGHT_FROM &&
            m->buyers[m->edges[e].source - node_buyer(m, 0)].is_ring_account)
            accounts[m->edges[e].target - node_seller(m, 0)]++;
    size_t pick = m->n_sellers;
    for (int pass = 0; pass < 2 && pick == m->n_sellers; pass++)   /* unlabelled first */
        for (size_t s = 0; s < m->n_sellers; s++)
            if (m->sellers[s].is_ring && (pass || !m->sellers[s].is_labelled) &&
                (pick == m->n_sellers || accounts[s] > accounts[pick]))
                pick = s;
    return node_seller(m, pick < m->n_sellers ? pick : 0);
}

/* Runs on the sorted edges, whose bought edges come first, grouped by buyer. */
static weft_err choose_examples(const struct market *m, struct examples *ex, weft_error *err)
{
    memset(ex, 0, sizeof *ex);
    uint8_t *mine = weft_calloc_array(m->n_parts, 1);
    uint32_t *fits = weft_calloc_array(m->n_parts, sizeof *fits);
    uint32_t *degree = weft_calloc_array(m->n_parts, sizeof *degree);
    uint32_t *accounts = weft_calloc_array(m->n_sellers, sizeof *accounts);
    weft_err rc = WEFT_OK;
    if (!mine || !fits || !degree || !accounts) {
        rc = weft_error_set(err, WEFT_ERR_NOMEM, "out of memory for the demo's examples");
        goto done;
    }
    size_t n_bought = 0;
    while (n_bought < m->n_edges && m->edges[n_bought].rel == REL_BOUGHT)
        degree[m->edges[n_bought++].target - node_part(m, 0)]++;
    for (size_t e = 0; !ex->has_buyer && e < n_bought;) {
        size_t end = e + 1;
        while (end < n_bought && m->edges[end].source == m->edges[e].source)
            end++;
        const struct buyer *x = &m->buyers[m->edges[e].source - node_buyer(m, 0)];
        uint32_t p = x->hobby == DRONES && x->hobby2 == DRONES && end - e >= 6
                         ? part_to_explain(m, e, end, degree, mine, fits)
                         : UINT32_MAX;
        if (p != UINT32_MAX) {
            ex->has_buyer = true;
            ex->buyer = m->edges[e].source;
            ex->part = node_part(m, p);
        }
        e = end;
    }
    ex->seller = seller_to_show(m, accounts);
done:
    free(mine);
    free(fits);
    free(degree);
    free(accounts);
    return rc;
}

/* ---- the files ---- */

struct out {
    FILE *f;
    char path[4096];
};

static weft_err out_open(struct out *o, const char *dir, const char *name, weft_error *err)
{
    if ((size_t)snprintf(o->path, sizeof o->path, "%s/%s", dir, name) >= sizeof o->path)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: path too long", dir);
    o->f = fopen(o->path, "w");
    if (!o->f)
        return weft_error_set(err, WEFT_ERR_IO, "%s: %s", o->path, strerror(errno));
    return WEFT_OK;
}

/* Closes @p o; a failed write anywhere in the file shows here. */
static weft_err out_close(struct out *o, weft_err rc, weft_error *err)
{
    if (!o->f)
        return rc;
    bool bad = ferror(o->f) != 0;
    bad |= fclose(o->f) != 0;
    o->f = NULL;
    if (rc == WEFT_OK && bad)
        rc = weft_error_set(err, WEFT_ERR_IO, "%s: write failed", o->path);
    return rc;
}

/* mkdir -p */
static weft_err make_dir(const char *dir, weft_error *err)
{
    char path[4096];
    if ((size_t)snprintf(path, sizeof path, "%s", dir) >= sizeof path)
        return weft_error_set(err, WEFT_ERR_INVALID, "%s: path too long", dir);
    for (char *p = path + 1;; p++) {
        bool is_end = *p == '\0';
        if (*p != '/' && !is_end)
            continue;
        *p = '\0';
        if (mkdir(path, 0755) != 0 && errno != EEXIST)
            return weft_error_set(err, WEFT_ERR_IO, "%s: %s", path, strerror(errno));
        if (is_end)
            break;
        *p = '/';
    }
    struct stat st;
    if (stat(dir, &st) != 0 || !S_ISDIR(st.st_mode))
        return weft_error_set(err, WEFT_ERR_IO, "%s: not a directory", dir);
    return WEFT_OK;
}

static const char *node_type(const struct market *m, uint32_t v)
{
    return v < node_part(m, 0) ? "category" : v < node_seller(m, 0) ? "part"
                                            : v < node_buyer(m, 0) ? "seller" : "buyer";
}

static const char *seller_class(const struct seller *x)
{
    return x->is_ring ? "suspicious" : "legit";
}

static weft_err write_edges(const struct market *m, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "edges.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo (invented data, see README.txt): source<TAB>relation<TAB>target\n");
    for (size_t e = 0; e < m->n_edges; e++)
        fprintf(o.f, "%s\t%s\t%s\n", m->names[m->edges[e].source],
                relation_names[m->edges[e].rel], m->names[m->edges[e].target]);
    return out_close(&o, rc, err);
}

static weft_err write_types(const struct market *m, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "types.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo: node<TAB>type\n");
    for (uint32_t v = 0; v < m->n_nodes; v++)
        fprintf(o.f, "%s\t%s\n", m->names[v], node_type(m, v));
    return out_close(&o, rc, err);
}

static weft_err write_labels(const struct market *m, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "labels.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo: seller<TAB>class, for the labelled sellers only (invented)\n");
    for (size_t s = 0; s < m->n_sellers; s++)
        if (m->sellers[s].is_labelled)
            fprintf(o.f, "%s\t%s\n", m->names[node_seller(m, s)], seller_class(&m->sellers[s]));
    return out_close(&o, rc, err);
}

static weft_err write_split(const struct market *m, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "split.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo: seller<TAB>train|valid|test for the labelled sellers (--split)\n");
    for (size_t s = 0; s < m->n_sellers; s++)
        if (m->sellers[s].is_labelled)
            fprintf(o.f, "%s\t%s\n", m->names[node_seller(m, s)],
                    part_names[m->sellers[s].part]);
    return out_close(&o, rc, err);
}

static unsigned orders_band(uint32_t n)
{
    return n <= 3 ? 0 : n <= 10 ? 1 : 2;
}

static weft_err write_features(const struct market *m, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "features.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo: node<TAB>feature indices (README.txt lists what each means)\n");
    for (unsigned c = 0; c < N_CATEGORIES; c++)
        fprintf(o.f, "%s\t%d %u\n", m->names[node_category(c)], F_TYPE + 3, F_CATEGORY + c);
    for (size_t p = 0; p < m->n_parts; p++)
        fprintf(o.f, "%s\t%d %u\n", m->names[node_part(m, p)], F_TYPE + 2,
                F_CATEGORY + families[m->parts[p].family].category);
    for (size_t s = 0; s < m->n_sellers; s++) {
        const struct seller *x = &m->sellers[s];
        fprintf(o.f, "%s\t%d %u %u %u %u\n", m->names[node_seller(m, s)], F_TYPE + 1,
                F_SELLER_AGE + x->age, F_UNDERPRICED + x->underpriced, F_RETURNS + x->returns,
                F_REGION + x->region);
    }
    for (size_t b = 0; b < m->n_buyers; b++) {
        const struct buyer *x = &m->buyers[b];
        fprintf(o.f, "%s\t%d %u %u %u\n", m->names[node_buyer(m, b)], F_TYPE + 0,
                F_REGION + x->region, F_BUYER_AGE + x->age, F_ORDERS + orders_band(x->n_bought));
    }
    return out_close(&o, rc, err);
}

static weft_err write_planted(const struct market *m, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "planted.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo: node<TAB>planted truth: a seller's class (every seller), a "
                 "buyer's hobbies or ring-account. Never a training input.\n");
    for (size_t s = 0; s < m->n_sellers; s++)
        fprintf(o.f, "%s\t%s\n", m->names[node_seller(m, s)], seller_class(&m->sellers[s]));
    for (size_t b = 0; b < m->n_buyers; b++) {
        const struct buyer *x = &m->buyers[b];
        if (x->is_ring_account)
            fprintf(o.f, "%s\tring-account\n", m->names[node_buyer(m, b)]);
        else if (x->hobby2 == x->hobby)
            fprintf(o.f, "%s\t%s\n", m->names[node_buyer(m, b)], hobby_names[x->hobby]);
        else
            fprintf(o.f, "%s\t%s,%s\n", m->names[node_buyer(m, b)], hobby_names[x->hobby],
                    hobby_names[x->hobby2]);
    }
    return out_close(&o, rc, err);
}

static weft_err write_examples(const struct market *m, const struct examples *ex,
                               const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "examples.tsv", err);
    if (rc != WEFT_OK)
        return rc;
    fprintf(o.f, "# weft demo: what<TAB>node, the nodes the demo's queries ask about\n");
    if (ex->has_buyer)
        fprintf(o.f, "buyer\t%s\npart\t%s\n", m->names[ex->buyer], m->names[ex->part]);
    fprintf(o.f, "seller\t%s\n", m->names[ex->seller]);
    return out_close(&o, rc, err);
}

/* What the README counts. */
struct sizes {
    size_t per_relation[N_RELATIONS];
    size_t labelled[2];        /* legit, suspicious */
    size_t ring_accounts;
};

static void count_sizes(const struct market *m, struct sizes *z)
{
    memset(z, 0, sizeof *z);
    for (size_t e = 0; e < m->n_edges; e++)
        z->per_relation[m->edges[e].rel]++;
    for (size_t s = 0; s < m->n_sellers; s++)
        if (m->sellers[s].is_labelled)
            z->labelled[m->sellers[s].is_ring]++;
    for (size_t b = 0; b < m->n_buyers; b++)
        z->ring_accounts += m->buyers[b].is_ring_account;
}

static weft_err write_readme(const struct market *m, const struct examples *ex,
                             const struct sizes *z, const char *dir, weft_error *err)
{
    struct out o;
    weft_err rc = out_open(&o, dir, "README.txt", err);
    if (rc != WEFT_OK)
        return rc;
    const demo_opts *op = m->o;
    FILE *f = o.f;
    fprintf(f,
            "weft demo data: a regional marketplace for hobby electronics parts\n"
            "\n"
            "Everything here is invented by `weft demo --seed %llu --buyers %llu --sellers %llu "
            "--ring %llu\n--ring-buyers %llu --labelled %g`; no real shop, person or order is in "
            "it. The same\ncommand writes the same bytes.\n\n",
            (unsigned long long)op->seed, (unsigned long long)op->n_buyers,
            (unsigned long long)op->n_sellers, (unsigned long long)op->n_ring,
            (unsigned long long)op->n_ring_buyers, op->labelled);
    fprintf(f,
            "The scenario. Hobbyists in four regions (north, harbour, valley, uplands) buy parts\n"
            "from the shops of one online marketplace. Each buyer follows a hobby, sometimes two:\n"
            "drones, robotics, retro computing, synths, home automation, ham radio, wearables or\n"
            "3D printing. A hobby has kits of part families that fit each other (a flight\n"
            "controller, ESCs, motors, propellers and a frame), and a purchase is a basket from\n"
            "one kit: a part, parts that fit it, perhaps a tool or a cable, mostly from one shop.\n"
            "Shops specialise in one or two hobbies, bigger shops sell more, and buyers prefer\n"
            "shops of their own region. A ring of %llu sellers lists a few of the same popular,\n"
            "counterfeit-prone parts (microcontroller boards, batteries, radio modules, sensors);\n"
            "its shops are on average younger and cheaper and see more returns (on average only:\n"
            "many honest shops are new or cheap too), and %zu ring accounts buy from two to four\n"
            "ring sellers and from nobody else. Real buyers buy from the ring too.\n"
            "%zu of the %zu sellers carry an observed label (legit or suspicious); the others\n"
            "are left for a model to predict.\n\n",
            (unsigned long long)op->n_ring, z->ring_accounts, z->labelled[0] + z->labelled[1],
            m->n_sellers);
    fprintf(f,
            "What a model can learn here: the parts a buyer is likely to want next (their hobby,\n"
            "parts that fit what they bought), the parts a shop lists, and which unlabelled\n"
            "sellers look like the labelled suspicious ones.\n\n");
    fprintf(f,
            "Files\n"
            "  edges.tsv     source<TAB>relation<TAB>target; relations: bought (buyer -> part),\n"
            "                bought_from (buyer -> seller), sells (seller -> part), fits (part ->\n"
            "                part: A fits B when they belong in one build), in_category (part ->\n"
            "                category). A repeated purchase is one edge.\n"
            "  types.tsv     node<TAB>type: buyer, seller, part, category (weft train --types)\n"
            "  labels.tsv    seller<TAB>legit|suspicious, labelled sellers only (--labels)\n"
            "  split.tsv     seller<TAB>train|valid|test: the labelled sellers of each class,\n"
            "                50 %% for training, 15 %% for validation, 35 %% for testing\n"
            "                (--split)\n"
            "  features.tsv  node<TAB>feature indices (--features), listed below\n"
            "  planted.tsv   the planted truth: every seller's class, every buyer's hobbies or\n"
            "                ring-account. For checking predictions; never train on it.\n"
            "  examples.tsv  what<TAB>node: the nodes the demo's queries use (below)\n"
            "  README.txt    this file\n\n");
    fprintf(f, "Sizes\n  nodes        %zu: %zu buyers (%zu of them ring accounts), %zu sellers\n"
               "               (%llu in the ring), %zu parts, %d categories\n",
            m->n_nodes, m->n_buyers, z->ring_accounts, m->n_sellers,
            (unsigned long long)op->n_ring, m->n_parts, N_CATEGORIES);
    fprintf(f, "  edges        %zu:", m->n_edges);
    for (size_t r = 0; r < N_RELATIONS; r++)
        fprintf(f, "%s %zu %s", r == 0 ? "" : r == 3 ? ",\n              " : ",",
                z->per_relation[r], relation_names[r]);
    fprintf(f, "\n  labels       %zu sellers: %zu legit, %zu suspicious; %zu unlabelled\n\n",
            z->labelled[0] + z->labelled[1], z->labelled[0], z->labelled[1],
            m->n_sellers - z->labelled[0] - z->labelled[1]);
    fprintf(f,
            "Feature indices (features.tsv)\n"
            "  %2d-%2d  node type: buyer, seller, part, category\n"
            "  %2d-%2d  seller account age: under 3 months, 3-12 months, 1-3 years, over 3 years\n"
            "  %2d-%2d  share of a seller's listings priced under the market: low, medium, high\n"
            "  %2d-%2d  returns per order at a seller: low, medium, high\n"
            "  %2d-%2d  region (sellers ship from it, buyers live in it):",
            F_TYPE, F_TYPE + 3, F_SELLER_AGE, F_SELLER_AGE + 3, F_UNDERPRICED, F_UNDERPRICED + 2,
            F_RETURNS, F_RETURNS + 2, F_REGION, F_REGION + N_REGIONS - 1);
    for (size_t r = 0; r < N_REGIONS; r++)
        fprintf(f, "%s %s", r ? "," : "", region_names[r]);
    fprintf(f,
            "\n  %2d-%2d  buyer account age, the bands of the sellers'\n"
            "  %2d-%2d  parts a buyer bought: 1-3, 4-10, over 10\n"
            "  %2d-%2d  a part's category (a category node has its own):",
            F_BUYER_AGE, F_BUYER_AGE + 3, F_ORDERS, F_ORDERS + 2, F_CATEGORY,
            F_CATEGORY + N_CATEGORIES - 1);
    for (size_t c = 0; c < N_CATEGORIES; c++)
        fprintf(f, "%s%s", c == 0 ? "\n         " : c % 4 ? ", " : ",\n         ",
                category_names[c]);
    const struct seller *shown = &m->sellers[ex->seller - node_seller(m, 0)];
    fprintf(f, "\n\nThe nodes the demo's queries ask about (examples.tsv)\n");
    if (ex->has_buyer)
        fprintf(f, "  %-34s a drone hobbyist\n  %-34s fits parts they bought; not bought yet\n",
                m->names[ex->buyer], m->names[ex->part]);
    fprintf(f, "  %-34s %s\n\n", m->names[ex->seller],
            !shown->is_ring ? "a seller" : shown->is_labelled ? "a ring seller"
                                         : "a ring seller without an observed label");
    fprintf(f,
            "A caution. A label predicted from data like this is a probability learnt from past\n"
            "labels. On real data a prediction about a seller (often a person or a small\n"
            "business) can be wrong and can repeat the biases of whoever assigned the labels:\n"
            "use it to decide what a person reviews first, never as the sole ground for a\n"
            "decision, and follow local law and data-protection rules on what may be done\n"
            "with it.\n");
    return out_close(&o, rc, err);
}

static weft_err write_all(const struct market *m, const char *dir, weft_error *err)
{
    struct examples ex;
    struct sizes z;
    count_sizes(m, &z);
    weft_err rc = choose_examples(m, &ex, err);
    if (rc == WEFT_OK)
        rc = make_dir(dir, err);
    if (rc == WEFT_OK)
        rc = write_edges(m, dir, err);
    if (rc == WEFT_OK)
        rc = write_types(m, dir, err);
    if (rc == WEFT_OK)
        rc = write_labels(m, dir, err);
    if (rc == WEFT_OK)
        rc = write_split(m, dir, err);
    if (rc == WEFT_OK)
        rc = write_features(m, dir, err);
    if (rc == WEFT_OK)
        rc = write_planted(m, dir, err);
    if (rc == WEFT_OK)
        rc = write_examples(m, &ex, dir, err);
    if (rc == WEFT_OK)
        rc = write_readme(m, &ex, &z, dir, err);
    if (rc == WEFT_OK)
        printf("weft demo: wrote %zu nodes (%zu buyers, %zu sellers, %zu parts, %d categories) "
               "and %zu edges to %s\n",
               m->n_nodes, m->n_buyers, m->n_sellers, m->n_parts, N_CATEGORIES, m->n_edges, dir);
    return rc;
}

int cmd_demo_main(int argc, char **argv)
{
    demo_opts o = demo_defaults;
    int status = parse_args(argc, argv, &o);
    if (status != CMD_OK)
        return status;
    if (o.is_help) {
        print_usage();
        return CMD_OK;
    }
    struct market m;
    memset(&m, 0, sizeof m);
    m.o = &o;
    weft_error err = { WEFT_OK, "" };
    weft_err rc = generate(&m, &err);
    if (rc == WEFT_OK)
        rc = write_all(&m, o.out, &err);
    if (rc == WEFT_OK && fflush(stdout) != 0)
        rc = weft_error_set(&err, WEFT_ERR_IO, "stdout: write failed");
    market_fini(&m);
    return rc == WEFT_OK ? CMD_OK : cmd_report_error(&err);
}
