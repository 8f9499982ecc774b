/*
 * cmd_people.c - plyledger new-key, and plyledger people: the register of
 * people, their keys and qualifications (plyledger/people.h).
 */
#include "cli.h"

#include <stdlib.h>
#include <string.h>

/* ---- new-key ------------------------------------------------------------ */

static const char key_usage[] = "FILE";
static const char key_help[] =
    "usage: plyledger new-key FILE\n"
    "\n"
    "Make a new Ed25519 key pair for signing interpretations and dispositions, and\n"
    "write it to FILE, which must not exist: readable and writable by you only\n"
    "(mode 0600). Keep it to yourself; plyledger refuses a key file that others may\n"
    "read. Prints the public key, which `plyledger people add-key` registers.\n"
    "\n"
    "Options:\n"
    "      --json         print the public key and its fingerprint as JSON\n"
    "  -q, --quiet        print nothing on success\n"
    "  -h, --help         show this help\n";

int cmd_new_key(int argc, char **argv)
{
    cli_common common;
    int first;
    int rc = cli_parse(argc, argv, "", NULL, &common, NULL, NULL, key_usage, key_help, &first);
    if (rc >= 0)
        return rc;
    if (argc - first != 1)
        return cli_usage_error(key_usage, "give the key file to write");
    if ((rc = cli_guard_output(&common, argv[first])))
        return rc;
    pl_sign_key key;
    pl_err err = { 0 };
    int st = pl_key_create(argv[first], &key, &err);
    if (st)
        return cli_fail_err(st, &err);
    char hex[PL_SHA256_HEX_SIZE], fp[PL_SIGN_FINGERPRINT_SIZE];
    pl_sha256_hex(hex, key.public_key);
    pl_sign_fingerprint(fp, key.public_key);
    pl_sign_key_wipe(&key);
    if (common.json) {
        cJSON *j = cJSON_CreateObject();
        if (j) {
            cJSON_AddStringToObject(j, "file", argv[first]);
            cJSON_AddStringToObject(j, "public_key", hex);
            cJSON_AddStringToObject(j, "fingerprint", fp);
        }
        return cli_print_json(j);
    }
    if (!common.quiet)
        printf("wrote key %s to %s (mode 0600)\npublic key %s\n", fp, argv[first], hex);
    return CLI_OK;
}

/* ---- people ------------------------------------------------------------- */

static const char usage[] = "add|add-key|qualify|procedure|list [options]";
static const char help[] =
    "usage: plyledger people add --handle H --name NAME --role ROLE [--organisation ORG]\n"
    "       plyledger people add-key --handle H --key FILE [--from DATE] [--reason TEXT]\n"
    "       plyledger people qualify --handle H --method METHOD --level LEVEL\n"
    "                                --from DATE --until DATE [--certificate REF]\n"
    "       plyledger people procedure --procedure REF [--rev REV] --levels \"2 3\"\n"
    "       plyledger people list [--handle H] [--json]\n"
    "\n"
    "The register of the people who inspect, interpret, decide and review.\n"
    "  add        a person: a handle (letters, digits, '.', '-', '_'; unique whatever its\n"
    "             case), a name, a role (@ROLES@) and an organisation\n"
    "  add-key    register the public half of the key in FILE (plyledger new-key) as\n"
    "             the person's signing key from DATE (default today); a key that\n"
    "             replaces an earlier one needs --reason, and signatures made before\n"
    "             stay checked against the key held on their date\n"
    "  qualify    a certification: METHOD (@METHODS@), LEVEL (@LEVELS@),\n"
    "             valid from and until the dates given, both included\n"
    "  procedure  the levels that may perform a written procedure (all revisions, or\n"
    "             --rev REV); the latest entry governs\n"
    "  list       the register, with each person's keys and qualifications\n"
    "\n"
    "Once the register holds an inspector, every inspection recorded must name a\n"
    "registered person by handle (--inspector) who holds a valid qualification for\n"
    "the site's method, on the inspection's date, at the level recorded (--level),\n"
    "and a level the procedure allows; otherwise nothing is recorded and the reason\n"
    "is named.\n"
    "\n"
    "Options:\n"
    "  -s, --store PATH   the store (default $PLYLEDGER_STORE)\n"
    "      --wait SECONDS @WAIT@\n"
    "      --json         print the result as JSON\n"
    "  -q, --quiet        print nothing on success\n"
    "  -h, --help         show this help\n";

enum {
    O_HANDLE = 0x500, O_NAME, O_ROLE, O_ORG, O_KEY, O_FROM, O_REASON, O_METHOD, O_LEVEL,
    O_UNTIL, O_CERT, O_PROC, O_REV, O_LEVELS
};

static const struct option opts[] = {
    { "handle", required_argument, NULL, O_HANDLE },
    { "name", required_argument, NULL, O_NAME },
    { "role", required_argument, NULL, O_ROLE },
    { "organisation", required_argument, NULL, O_ORG },
    { "key", required_argument, NULL, O_KEY },
    { "from", required_argument, NULL, O_FROM },
    { "reason", required_argument, NULL, O_REASON },
    { "method", required_argument, NULL, O_METHOD },
    { "level", required_argument, NULL, O_LEVEL },
    { "until", required_argument, NULL, O_UNTIL },
    { "certificate", required_argument, NULL, O_CERT },
    { "procedure", required_argument, NULL, O_PROC },
    { "rev", required_argument, NULL, O_REV },
    { "levels", required_argument, NULL, O_LEVELS },
    { NULL, 0, NULL, 0 },
};

typedef struct people_args {
    const char *handle, *name, *role, *org, *key, *from, *reason, *method, *level, *until,
        *cert, *proc, *rev, *levels;
} people_args;

static int take_opt(void *ctx, int opt, const char *arg)
{
    people_args *a = ctx;
    switch (opt) {
    case O_HANDLE: a->handle = arg; break;
    case O_NAME: a->name = arg; break;
    case O_ROLE: a->role = arg; break;
    case O_ORG: a->org = arg; break;
    case O_KEY: a->key = arg; break;
    case O_FROM: a->from = arg; break;
    case O_REASON: a->reason = arg; break;
    case O_METHOD: a->method = arg; break;
    case O_LEVEL: a->level = arg; break;
    case O_UNTIL: a->until = arg; break;
    case O_CERT: a->cert = arg; break;
    case O_PROC: a->proc = arg; break;
    case O_REV: a->rev = arg; break;
    case O_LEVELS: a->levels = arg; break;
    default: return cli_usage_error(usage, "unexpected option");
    }
    return 0;
}

/* Which options each action takes: an option given to another is a slip. */
static int only(const people_args *a, const char *action, const char *allowed)
{
    const struct {
        const char *name, *value;
    } given[] = {
        { "handle", a->handle }, { "name", a->name }, { "role", a->role },
        { "organisation", a->org }, { "key", a->key }, { "from", a->from },
        { "reason", a->reason }, { "method", a->method }, { "level", a->level },
        { "until", a->until }, { "certificate", a->cert }, { "procedure", a->proc },
        { "rev", a->rev }, { "levels", a->levels },
    };
    for (size_t i = 0; i < sizeof given / sizeof given[0]; i++) {
        char word[32];
        snprintf(word, sizeof word, " %s ", given[i].name);
        if (given[i].value && !strstr(allowed, word))
            return cli_usage_error(usage, "people %s does not take --%s", action,
                                   given[i].name);
    }
    return 0;
}

typedef struct lister {
    cli_table *t;
    cJSON *arr;
    pl_store *store;
} lister;

static int add_key_row(void *ud, const pl_person_key *k)
{
    lister *l = ud;
    unsigned char pub[32];
    char fp[PL_SIGN_FINGERPRINT_SIZE] = "?";
    if (pl_sha256_from_hex(pub, k->public_key) == PL_OK)
        pl_sign_fingerprint(fp, pub);
    if (l->arr) {
        cJSON *o = cJSON_CreateObject();
        if (o) {
            cJSON_AddStringToObject(o, "kind", "key");
            cJSON_AddStringToObject(o, "handle", k->handle);
            cJSON_AddStringToObject(o, "public_key", k->public_key);
            cJSON_AddStringToObject(o, "fingerprint", fp);
            cJSON_AddStringToObject(o, "valid_from", k->valid_from);
            cJSON_AddItemToArray(l->arr, o);
        }
        return 0;
    }
    char what[96];
    snprintf(what, sizeof what, "key %s", fp);
    const char *cells[4] = { k->handle, what, k->valid_from, k->reason[0] ? k->reason : "" };
    cli_table_row(l->t, cells);
    return 0;
}

static int add_qual_row(void *ud, const pl_qualification *q)
{
    lister *l = ud;
    if (l->arr) {
        cJSON *o = cJSON_CreateObject();
        if (o) {
            cJSON_AddStringToObject(o, "kind", "qualification");
            cJSON_AddStringToObject(o, "handle", q->handle);
            cJSON_AddStringToObject(o, "method", q->method);
            cJSON_AddStringToObject(o, "level", q->level);
            cJSON_AddStringToObject(o, "valid_from", q->valid_from);
            cJSON_AddStringToObject(o, "valid_until", q->valid_until);
            cJSON_AddStringToObject(o, "certificate", q->certificate);
            cJSON_AddItemToArray(l->arr, o);
        }
        return 0;
    }
    char what[128], when[80];
    snprintf(what, sizeof what, "%s level %s", q->method, q->level);
    snprintf(when, sizeof when, "%s to %s", q->valid_from, q->valid_until);
    const char *cells[4] = { q->handle, what, when, q->certificate };
    cli_table_row(l->t, cells);
    return 0;
}

static int add_person_row(void *ud, const pl_person *p)
{
    lister *l = ud;
    if (l->arr) {
        cJSON *o = cJSON_CreateObject();
        if (o) {
            cJSON_AddStringToObject(o, "kind", "person");
            cJSON_AddStringToObject(o, "handle", p->handle);
            cJSON_AddStringToObject(o, "name", p->name);
            cJSON_AddStringToObject(o, "role", p->role);
            cJSON_AddStringToObject(o, "organisation", p->organisation);
            cJSON_AddItemToArray(l->arr, o);
        }
        return 0;
    }
    char what[160];
    snprintf(what, sizeof what, "%s, %s", p->name, p->role);
    const char *cells[4] = { p->handle, what, "", p->organisation };
    cli_table_row(l->t, cells);
    return 0;
}

static int list(const cli_common *common, const people_args *a)
{
    pl_store *store;
    int rc = cli_open_store(&store, common, PL_STORE_READONLY);
    if (rc)
        return rc;
    static const char *const heads[4] = { "HANDLE", "WHAT", "VALID", "NOTE" };
    lister l = { common->json ? NULL : cli_table_new(4, heads),
                 common->json ? cJSON_CreateArray() : NULL, store };
    pl_err err = { 0 };
    int st = pl_store_list_people(store, add_person_row, &l, &err);
    if (!st)
        st = pl_store_list_person_keys(store, a->handle, add_key_row, &l, &err);
    if (!st)
        st = pl_store_list_qualifications(store, a->handle, add_qual_row, &l, &err);
    pl_store_close(store);
    if (st) {
        cli_table_free(l.t);
        cJSON_Delete(l.arr);
        return cli_fail_err(st, &err);
    }
    if (common->json)
        return cli_print_json(l.arr);
    cli_table_print(l.t, stdout);
    cli_table_free(l.t);
    return CLI_OK;
}

int cmd_people(int argc, char **argv)
{
    if (argc < 2 || argv[1][0] == '-') {
        if (argc >= 2 && (strcmp(argv[1], "-h") == 0 || strcmp(argv[1], "--help") == 0))
            return cli_help(help);
        return cli_usage_error(usage, "which action? add, add-key, qualify, procedure or list");
    }
    const char *action = argv[1];
    cli_common common;
    people_args a = { 0 };
    int rc = cli_parse(argc - 1, argv + 1, "", opts, &common, take_opt, &a, usage, help, NULL);
    if (rc >= 0)
        return rc;
    if (strcmp(action, "list") == 0)
        return (rc = only(&a, action, " handle ")) ? rc : list(&common, &a);
    pl_err err = { 0 };
    pl_store *store = NULL;
    int st = 0;
    char today[PL_DATE_SIZE];
    cli_today(today, sizeof today);
    if (strcmp(action, "add") == 0) {
        if ((rc = only(&a, action, " handle name role organisation ")))
            return rc;
        if (!a.handle || !a.name || !a.role)
            return cli_usage_error(usage, "people add needs --handle, --name and --role");
        pl_person p;
        memset(&p, 0, sizeof p);
        if ((rc = cli_key(p.handle, sizeof p.handle, a.handle, "--handle")) ||
            (rc = cli_text(p.name, sizeof p.name, a.name, "--name")) ||
            (rc = cli_text(p.role, sizeof p.role, a.role, "--role")) ||
            (rc = cli_text(p.organisation, sizeof p.organisation, a.org, "--organisation")))
            return rc;
        if ((rc = cli_open_store(&store, &common, 0)))
            return rc;
        st = pl_store_add_person(store, &p, NULL, &err);
        if (!st && !common.quiet)
            printf("registered %s (%s, %s)\n", p.handle, p.name, p.role);
    } else if (strcmp(action, "add-key") == 0) {
        if ((rc = only(&a, action, " handle key from reason ")))
            return rc;
        if (!a.handle || !a.key)
            return cli_usage_error(usage, "people add-key needs --handle and --key");
        pl_person_key k;
        memset(&k, 0, sizeof k);
        if ((rc = cli_key(k.handle, sizeof k.handle, a.handle, "--handle")) ||
            (rc = cli_text(k.valid_from, sizeof k.valid_from, a.from ? a.from : today,
                           "--from")) ||
            (rc = cli_free(k.reason, sizeof k.reason, a.reason, "--reason")))
            return rc;
        pl_sign_key key;
        if ((st = pl_key_load(a.key, &key, &err)))
            return cli_fail_err(st, &err);
        pl_sha256_hex(k.public_key, key.public_key);
        pl_sign_key_wipe(&key);
        if ((rc = cli_open_store(&store, &common, 0)))
            return rc;
        st = pl_store_add_person_key(store, &k, NULL, &err);
        if (!st && !common.quiet)
            printf("registered the key of %s from %s: %s\n", k.handle, k.valid_from,
                   k.public_key);
    } else if (strcmp(action, "qualify") == 0) {
        if ((rc = only(&a, action, " handle method level from until certificate ")))
            return rc;
        if (!a.handle || !a.method || !a.level || !a.from || !a.until)
            return cli_usage_error(usage, "people qualify needs --handle, --method, --level, "
                                   "--from and --until");
        pl_qualification q;
        memset(&q, 0, sizeof q);
        if ((rc = cli_key(q.handle, sizeof q.handle, a.handle, "--handle")) ||
            (rc = cli_text(q.method, sizeof q.method, a.method, "--method")) ||
            (rc = cli_text(q.level, sizeof q.level, a.level, "--level")) ||
            (rc = cli_text(q.valid_from, sizeof q.valid_from, a.from, "--from")) ||
            (rc = cli_text(q.valid_until, sizeof q.valid_until, a.until, "--until")) ||
            (rc = cli_text(q.certificate, sizeof q.certificate, a.cert, "--certificate")))
            return rc;
        if ((rc = cli_open_store(&store, &common, 0)))
            return rc;
        st = pl_store_add_qualification(store, &q, NULL, &err);
        if (!st && !common.quiet)
            printf("recorded %s: %s level %s, valid %s to %s\n", q.handle, q.method, q.level,
                   q.valid_from, q.valid_until);
    } else if (strcmp(action, "procedure") == 0) {
        if ((rc = only(&a, action, " procedure rev levels ")))
            return rc;
        if (!a.proc || !a.levels)
            return cli_usage_error(usage, "people procedure needs --procedure and --levels");
        pl_procedure_levels p;
        memset(&p, 0, sizeof p);
        if ((rc = cli_text(p.procedure, sizeof p.procedure, a.proc, "--procedure")) ||
            (rc = cli_text(p.procedure_rev, sizeof p.procedure_rev, a.rev, "--rev")) ||
            (rc = cli_text(p.levels, sizeof p.levels, a.levels, "--levels")))
            return rc;
        if ((rc = cli_open_store(&store, &common, 0)))
            return rc;
        st = pl_store_set_procedure_levels(store, &p, NULL, &err);
        if (!st && !common.quiet)
            printf("procedure %s%s%s: performed by levels %s\n", p.procedure,
                   p.procedure_rev[0] ? " revision " : "", p.procedure_rev, a.levels);
    } else {
        return cli_usage_error(usage, "unknown action '%s': add, add-key, qualify, procedure "
                               "or list", action);
    }
    pl_store_close(store);
    return st ? cli_fail_err(st, &err) : CLI_OK;
}
