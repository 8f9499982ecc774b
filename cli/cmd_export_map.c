/*
 * cmd_export_map.c - plyledger export-map: a stored map as a 16-bit PNG,
 * a float32 .npy or a colour rendering.
 */
#include "cli.h"

#include <math.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

static const char usage[] = "--map ID --output FILE [--format png|npy|render] [options]";
static const char help[] =
    "usage: plyledger export-map --map ID --output FILE [--format png|npy|render]\n"
    "                            [--channel N | --quantity Q] [rendering options]\n"
    "\n"
    "Write a stored map (its id is shown by 'plyledger history'). The content is\n"
    "checked against its recorded SHA-256 first.\n"
    "  png     16-bit grayscale PNG of one channel with plyledger.* text chunks\n"
    "          (scale, offset, nodata, quantity, unit, pitch); re-imports exactly\n"
    "          to the quantisation step\n"
    "  npy     float32 NumPy array of all channels (2-D, or channels x rows x cols)\n"
    "  render  8-bit colour picture of one channel with a colour bar and a scale bar,\n"
    "          named by airframe, site, date, map and quantity (SIMULATED first for\n"
    "          simulated data)\n"
    "The default format follows the file name: .npy gives npy, .png gives png.\n"
    "\n"
    "Options:\n"
    "      --map ID           the stored map (required)\n"
    "  -o, --output FILE      where to write (required)\n"
    "      --format FORMAT    png, npy or render\n"
    "      --channel N        channel index (default 0)\n"
    "      --quantity Q       the channel holding this quantity instead\n"
    "      --vmin V, --vmax V rendering value range (default 1st..99th percentile)\n"
    "      --colormap NAME    rendering colour map: ledger (default) or grey\n"
    "      --zoom N           rendering magnification (default automatic)\n"
    "      --no-colorbar      rendering without the colour bar\n"
    "      --no-scalebar      rendering without the scale bar\n"
    "  -s, --store PATH       the store (default $PLYLEDGER_STORE)\n"
    "      --json             print what was written as JSON\n"
    "  -q, --quiet            print nothing on success\n"
    "  -h, --help             show this help\n";

enum {
    O_MAP = 0x100, O_FORMAT, O_CHANNEL, O_QUANTITY, O_VMIN, O_VMAX, O_COLORMAP, O_ZOOM,
    O_NO_COLORBAR, O_NO_SCALEBAR,
};
static const struct option opts[] = {
    { "map", required_argument, NULL, O_MAP },
    { "output", required_argument, NULL, 'o' },
    { "format", required_argument, NULL, O_FORMAT },
    { "channel", required_argument, NULL, O_CHANNEL },
    { "quantity", required_argument, NULL, O_QUANTITY },
    { "vmin", required_argument, NULL, O_VMIN },
    { "vmax", required_argument, NULL, O_VMAX },
    { "colormap", required_argument, NULL, O_COLORMAP },
    { "zoom", required_argument, NULL, O_ZOOM },
    { "no-colorbar", no_argument, NULL, O_NO_COLORBAR },
    { "no-scalebar", no_argument, NULL, O_NO_SCALEBAR },
    { NULL, 0, NULL, 0 },
};

typedef struct export_args {
    long long map_id, channel, zoom;
    int has_map, has_channel;
    const char *output, *format, *quantity, *colormap;
    pl_render_options ropts;
} export_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    export_args *a = ctx;
    switch (opt) {
    case O_MAP:
        a->has_map = 1;
        return cli_count("--map", arg, &a->map_id, usage);
    case 'o': a->output = arg; break;
    case O_FORMAT: a->format = arg; break;
    case O_CHANNEL:
        a->has_channel = 1;
        return cli_count("--channel", arg, &a->channel, usage);
    case O_QUANTITY: a->quantity = arg; break;
    case O_VMIN: return cli_number("--vmin", arg, &a->ropts.vmin, usage);
    case O_VMAX: return cli_number("--vmax", arg, &a->ropts.vmax, usage);
    case O_COLORMAP: a->colormap = arg; break;
    case O_ZOOM:
        if (cli_count("--zoom", arg, &a->zoom, usage))
            return CLI_USAGE;
        if (a->zoom < 1 || a->zoom > PL_RENDER_MAX_ZOOM)
            return cli_usage_error(usage, "--zoom must be 1 to %u", PL_RENDER_MAX_ZOOM);
        a->ropts.zoom = (unsigned)a->zoom;
        break;
    case O_NO_COLORBAR: a->ropts.colorbar = 0; break;
    case O_NO_SCALEBAR: a->ropts.scalebar = 0; break;
    default: return CLI_USAGE;
    }
    return 0;
}

static const char *format_from_name(const char *path)
{
    const char *dot = strrchr(path, '.');
    if (dot && strcasecmp(dot, ".npy") == 0)
        return "npy";
    if (dot && strcasecmp(dot, ".png") == 0)
        return "png";
    return NULL;
}

int cmd_export_map(int argc, char **argv)
{
    cli_common common;
    export_args a;
    memset(&a, 0, sizeof a);
    pl_render_options init = PL_RENDER_OPTIONS_INIT;
    a.ropts = init;
    int rc = cli_parse(argc, argv, "o:", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    if (!a.has_map || !a.output)
        return cli_usage_error(usage, "--map and --output are required");
    if ((rc = cli_guard_output(&common, a.output)))
        return rc;
    const char *format = a.format ? a.format : format_from_name(a.output);
    if (!format)
        return cli_usage_error(usage, "cannot tell the format from '%s'; give --format", a.output);
    if (strcmp(format, "png") && strcmp(format, "npy") && strcmp(format, "render"))
        return cli_usage_error(usage, "--format must be png, npy or render");
    if (a.has_channel && a.quantity)
        return cli_usage_error(usage, "give --channel or --quantity, not both");
    if (a.colormap) {
        if (strcmp(a.colormap, "ledger") == 0)
            a.ropts.colormap = PL_COLORMAP_LEDGER;
        else if (strcmp(a.colormap, "grey") == 0 || strcmp(a.colormap, "gray") == 0)
            a.ropts.colormap = PL_COLORMAP_GREY;
        else
            return cli_usage_error(usage, "--colormap must be ledger or grey");
    }
    pl_store *store;
    if ((rc = cli_open_store(&store, &common, PL_STORE_READONLY)))
        return rc;
    pl_err err = { 0 };
    pl_map *map = NULL;
    pl_map_record rec;
    memset(&rec, 0, sizeof rec);
    int st = pl_store_load_map(store, (pl_id)a.map_id, &map, &rec, &err);
    /* what a rendering names: airframe, site, date, map (the quantity
     * follows), and whether the data are simulated */
    char ident[PL_RENDER_IDENTIFICATION_SIZE] = "";
    int simulated = 0;
    if (!st)
        st = pl_history_identification(ident, sizeof ident, &simulated, store, (pl_id)a.map_id,
                                       0, NULL, &err);
    pl_store_close(store);
    if (st) {
        free(rec.parameters_json);
        pl_map_free(map);
        return cli_fail_err(st, &err);
    }
    long long channel = a.channel;
    if (a.quantity) {
        int c = pl_map_find_channel(map, a.quantity);
        if (c < 0) {
            free(rec.parameters_json);
            pl_map_free(map);
            return cli_fail("map %lld has no channel of quantity %s", a.map_id, a.quantity);
        }
        channel = c;
    }
    if (channel >= (long long)map->nchannels) {
        uint32_t have = map->nchannels;
        free(rec.parameters_json);
        pl_map_free(map);
        return cli_fail("map %lld has %u channel(s); --channel %lld does not exist", a.map_id,
                        have, channel);
    }
    if (strcmp(format, "npy") == 0) {
        st = pl_map_save_npy(map, a.output, &err);
    } else if (strcmp(format, "png") == 0) {
        st = pl_map_save_png(map, (uint32_t)channel, a.output, &err);
    } else {
        pl_image *img = NULL;
        size_t n = strlen(ident);
        snprintf(ident + n, sizeof ident - n, " %s", map->channels[channel].quantity);
        a.ropts.identification = ident;
        a.ropts.simulated = simulated;
        st = pl_render_map(&img, map, (uint32_t)channel, &a.ropts, &err);
        if (!st)
            st = pl_image_save_png(img, a.output, &err);
        pl_image_free(img);
    }
    if (st) {
        free(rec.parameters_json);
        pl_map_free(map);
        return cli_fail_err(st, &err);
    }
    if (common.json) {
        cJSON *o = cJSON_CreateObject();
        cJSON_AddNumberToObject(o, "map", (double)a.map_id);
        cJSON_AddStringToObject(o, "format", format);
        cJSON_AddStringToObject(o, "output", a.output);
        if (strcmp(format, "npy"))
            cJSON_AddNumberToObject(o, "channel", (double)channel);
        cJSON_AddStringToObject(o, "sha256", rec.sha256);
        free(rec.parameters_json);
        pl_map_free(map);
        return cli_print_json(o);
    }
    if (!common.quiet) {
        if (strcmp(format, "npy") == 0)
            printf("wrote map %lld (%u channel(s), %ux%u) to %s\n", a.map_id, map->nchannels,
                   map->width, map->height, a.output);
        else
            printf("wrote map %lld channel %lld (%s [%s]) as %s to %s\n", a.map_id, channel,
                   map->channels[channel].quantity, map->channels[channel].unit, format,
                   a.output);
    }
    free(rec.parameters_json);
    pl_map_free(map);
    return CLI_OK;
}
