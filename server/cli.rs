//! Command-line interface: `serve`, `token create`, the tools for planners, and `copy`,
//! `backup` and `restore` for moving and keeping data.

use crate::config::{Limits, ServeConfig, SignInLimits, check_public_url, default_database_url};
use crate::service::auth::{self, Role};
use crate::store::Store;
use clap::{Parser, Subcommand, ValueEnum};
use std::path::PathBuf;
use std::process::ExitCode;

#[derive(Parser)]
#[command(
    name = "goalsmith",
    version,
    about = "Shared, revisioned goals for robot planners"
)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(clap::Args, Clone)]
struct DbArgs {
    /// Database URL: sqlite://PATH or postgres://… (default sqlite://DATA_DIR/goalsmith.db)
    #[arg(long, env = "GOALSMITH_DATABASE_URL")]
    database: Option<String>,
    /// Directory for the default SQLite database
    #[arg(long, env = "GOALSMITH_DATA_DIR", default_value = "./goalsmith-data")]
    data_dir: PathBuf,
}

impl DbArgs {
    fn url(&self) -> String {
        self.database
            .clone()
            .unwrap_or_else(|| default_database_url(&self.data_dir))
    }
}

/// Sign-in throttle settings. Hidden: the defaults (see [`SignInLimits`]) are the documented
/// behaviour, and these exist so tests can reach the limits with a few requests.
#[derive(clap::Args, Clone)]
struct SignInArgs {
    #[arg(long, hide = true)]
    signin_window_s: Option<u64>,
    #[arg(long, hide = true)]
    signin_failures_per_login: Option<usize>,
    #[arg(long, hide = true)]
    signin_attempts_per_address: Option<usize>,
    #[arg(long, hide = true)]
    password_hashes_at_once: Option<usize>,
    #[arg(long, hide = true)]
    password_hash_queue: Option<usize>,
    #[arg(long, hide = true)]
    password_hash_wait_ms: Option<u64>,
}

impl SignInArgs {
    fn limits(&self) -> SignInLimits {
        let d = SignInLimits::default();
        SignInLimits {
            window_s: self.signin_window_s.unwrap_or(d.window_s),
            failures_per_login: self
                .signin_failures_per_login
                .unwrap_or(d.failures_per_login),
            attempts_per_address: self
                .signin_attempts_per_address
                .unwrap_or(d.attempts_per_address),
            tracked_keys: d.tracked_keys,
            // At least one slot, or nobody could ever sign in.
            hashes_at_once: self
                .password_hashes_at_once
                .unwrap_or(d.hashes_at_once)
                .max(1),
            hash_queue: self.password_hash_queue.unwrap_or(d.hash_queue),
            hash_wait_ms: self.password_hash_wait_ms.unwrap_or(d.hash_wait_ms),
        }
    }
}

#[derive(Subcommand)]
enum Command {
    /// Run the HTTP server
    Serve {
        /// Address to listen on; port 0 picks a free port
        #[arg(long, env = "GOALSMITH_BIND", default_value = "127.0.0.1:8080")]
        bind: String,
        #[command(flatten)]
        db: DbArgs,
        /// Load the demo scenario (a greenhouse potting bench) into an empty database
        #[arg(long)]
        demo: bool,
        /// The address people reach the server at (e.g. https://goals.example.org), used for
        /// invite and start-up links; default: the address it listens on
        #[arg(long, env = "GOALSMITH_PUBLIC_URL")]
        public_url: Option<String>,
        /// A secret that lets scrapers off this host read /metrics (as `Authorization: Bearer
        /// …`); without it only loopback clients may
        #[arg(long, env = "GOALSMITH_METRICS_TOKEN", hide_env_values = true)]
        metrics_token: Option<String>,
        #[command(flatten)]
        signin: SignInArgs,
    },
    /// Manage API tokens
    Token {
        #[command(subcommand)]
        command: TokenCommand,
    },
    /// Score candidates against a bundle offline; prints the same JSON as the HTTP route
    Cost {
        /// A bundle.zip exported from a goal revision
        #[arg(long)]
        bundle: PathBuf,
        /// JSON file {"points": [N][T][P][2]}
        #[arg(long, conflicts_with = "maps", required_unless_present = "maps")]
        points: Option<PathBuf>,
        /// NPY file of float32/float16 probability maps (N, T, P, h, w) or points (N, T, P, 2)
        #[arg(long)]
        maps: Option<PathBuf>,
    },
    /// Copy every table of one database into another (e.g. SQLite to PostgreSQL), never
    /// overwriting, then verify row counts, a SHA-256 per table and the stored hashes; rerun to
    /// take rows written since
    Copy {
        /// Source database URL (only read)
        #[arg(long)]
        from: String,
        /// Target database URL: migrated first; must be another database that no server uses
        #[arg(long)]
        to: String,
    },
    /// Write a consistent snapshot of a SQLite database to a new file (safe while the server
    /// runs); PostgreSQL keeps pg_dump and its replication
    Backup {
        #[command(flatten)]
        db: DbArgs,
        /// The backup file to write; never overwritten
        #[arg(long)]
        out: PathBuf,
    },
    /// Put a backup made by `goalsmith backup` in place as the SQLite database; stop the server
    /// first (into PostgreSQL: `goalsmith copy --from sqlite://BACKUP --to postgres://…`)
    Restore {
        /// The backup file
        #[arg(long)]
        from: PathBuf,
        #[command(flatten)]
        db: DbArgs,
        /// Replace an existing database (refused while a process has it open)
        #[arg(long)]
        force: bool,
    },
    /// Run a built-in benchmark on synthetic data; one JSON object per line
    Bench {
        /// Which kernel
        #[arg(value_enum)]
        name: BenchName,
        /// Print JSON lines (the only output format; accepted for scripts that pass it)
        #[arg(long)]
        json: bool,
    },
}

#[derive(Clone, Copy, ValueEnum)]
enum BenchName {
    Cost,
    Edt,
    /// Point tracking: pyramids, and a frame step of 16 and 100 points (640×480, one thread)
    Track,
    /// Reward fitting: one backward-plus-forward pass and a full fit (80×60 grid, 10 demos of
    /// 100 moves, one thread)
    Irl,
}

fn run_cost(
    bundle: &std::path::Path,
    points: Option<&std::path::Path>,
    maps: Option<&std::path::Path>,
) -> Result<(), Box<dyn std::error::Error>> {
    let read = |p: &std::path::Path| std::fs::read(p).map_err(|e| format!("{}: {e}", p.display()));
    // Learned terms are scored from the reward maps the bundle carries, checked against the
    // manifest's SHA-256 like goal.json.
    let spec = crate::scoring::read_bundle(&read(bundle)?)?.spec()?;
    let model = crate::scoring::model(&spec)?;
    let (content_type, body) = match (points, maps) {
        (Some(p), _) => ("application/json", read(p)?),
        (None, Some(m)) => ("application/x-npy", read(m)?),
        (None, None) => return Err("give --points or --maps".into()),
    };
    let result = crate::scoring::evaluate(&model, content_type, &body, usize::MAX / 2)?;
    // The result goes to stdout for scripts; the caution to stderr, where a person sees it.
    eprintln!("goalsmith: {}", crate::SAFETY_CAUTION);
    println!(
        "{}",
        serde_json::to_string(&crate::scoring::cost_response(&result))?
    );
    Ok(())
}

#[derive(Subcommand)]
enum TokenCommand {
    /// Create a token (and the team if missing); prints the token alone on stdout
    Create {
        /// Team name
        #[arg(long)]
        team: String,
        /// Role of the token
        #[arg(long, value_enum)]
        role: RoleArg,
        /// Who holds the token; recorded as the author of what it writes
        #[arg(long)]
        label: Option<String>,
        #[command(flatten)]
        db: DbArgs,
    },
}

#[derive(Clone, Copy, ValueEnum)]
enum RoleArg {
    Viewer,
    Editor,
    Owner,
}

impl From<RoleArg> for Role {
    fn from(r: RoleArg) -> Self {
        match r {
            RoleArg::Viewer => Role::Viewer,
            RoleArg::Editor => Role::Editor,
            RoleArg::Owner => Role::Owner,
        }
    }
}

fn init_logs() {
    use tracing_subscriber::EnvFilter;
    let filter = EnvFilter::try_from_env("GOALSMITH_LOG")
        .unwrap_or_else(|_| EnvFilter::new("info,sqlx=warn,tower_http=info"));
    use std::io::IsTerminal;
    // Colour only for a person at a terminal: a log redirected to a file or a collector must be
    // plain text (and NO_COLOR is honoured, as most command-line tools do).
    let ansi = std::io::stderr().is_terminal() && std::env::var_os("NO_COLOR").is_none();
    tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_ansi(ansi)
        .with_writer(std::io::stderr)
        .init();
}

fn runtime() -> Result<tokio::runtime::Runtime, std::io::Error> {
    tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .build()
}

/// Entry point of the binary.
pub fn main() -> ExitCode {
    let cli = Cli::parse();
    init_logs();
    let result: Result<(), Box<dyn std::error::Error>> = match cli.command {
        Command::Serve {
            bind,
            db,
            demo,
            public_url,
            metrics_token,
            signin,
        } => public_url
            .as_deref()
            .map(check_public_url)
            .transpose()
            .map_err(Into::into)
            .and_then(|public_url| {
                let limits = Limits {
                    signin: signin.limits(),
                    ..Limits::from_env()?
                };
                let config = ServeConfig {
                    bind,
                    database_url: db.url(),
                    data_dir: db.data_dir.clone(),
                    demo,
                    limits,
                    public_url,
                    metrics_token,
                };
                let rt = runtime()?;
                rt.block_on(crate::app::serve(config))
            }),
        Command::Token {
            command:
                TokenCommand::Create {
                    team,
                    role,
                    label,
                    db,
                },
        } => runtime().map_err(Into::into).and_then(|rt| {
            rt.block_on(async {
                let store = Store::connect(&db.url()).await?;
                let role = Role::from(role);
                let label = label.unwrap_or_else(|| format!("{} token", role.as_str()));
                let token = auth::bootstrap_token(&store, team.trim(), role, &label)
                    .await
                    .map_err(|e| e.to_string())?
                    .token;
                println!("{token}");
                store.close().await;
                Ok(())
            })
        }),
        Command::Cost {
            bundle,
            points,
            maps,
        } => run_cost(&bundle, points.as_deref(), maps.as_deref()),
        Command::Copy { from, to } => runtime().map_err(Into::into).and_then(|rt| {
            let report = rt.block_on(crate::store::copy::copy(&from, &to))?;
            println!("{report}");
            if report.verified() {
                Ok(())
            } else {
                Err("the copy does not match its source (see above)".into())
            }
        }),
        Command::Backup { db, out } => runtime().map_err(Into::into).and_then(|rt| {
            let snapshot = rt.block_on(crate::store::backup::backup(&db.url(), &out))?;
            println!("{snapshot}");
            Ok(())
        }),
        Command::Restore { from, db, force } => runtime().map_err(Into::into).and_then(|rt| {
            let snapshot = rt.block_on(crate::store::backup::restore(&from, &db.url(), force))?;
            println!("restored {}\n{snapshot}", from.display());
            Ok(())
        }),
        Command::Bench { name, json: _ } => {
            let name = match name {
                BenchName::Cost => "cost",
                BenchName::Edt => "edt",
                BenchName::Track => "track",
                BenchName::Irl => "irl",
            };
            goalsmith_core::bench::run(name)
                .map(|rows| {
                    for row in rows {
                        println!("{}", row.to_json());
                    }
                })
                .map_err(Into::into)
        }
    };
    match result {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) => {
            eprintln!("goalsmith: {e}");
            ExitCode::FAILURE
        }
    }
}
