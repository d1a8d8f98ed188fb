-- wellspan — PostgreSQL setup: a login role that is no superuser, and a database it owns.
--
-- Run once, as a superuser, with psql:
--   sudo -u postgres psql -v ON_ERROR_STOP=1 \
--        -v wellspan_password="$(cat /etc/wellspan/db.password)" -f setup.sql
-- Optional psql variables: wellspan_role (default wellspan), wellspan_database (default wellspan),
-- wellspan_password (without it the role gets no password and can log in only where pg_hba.conf
-- allows it without one, e.g. peer authentication on the local socket).
--
-- Safe to run again: an existing role and database are kept, the role's attributes are reset to
-- those below and a given password replaces the old one.
--
-- Tables are not created here: the service's migrations are applied at service start.

\if :{?wellspan_role}
\else
\set wellspan_role wellspan
\endif
\if :{?wellspan_database}
\else
\set wellspan_database wellspan
\endif

SELECT format('CREATE ROLE %I LOGIN', :'wellspan_role')
WHERE NOT EXISTS (SELECT FROM pg_roles WHERE rolname = :'wellspan_role') \gexec

ALTER ROLE :"wellspan_role"
    LOGIN NOSUPERUSER NOCREATEDB NOCREATEROLE NOREPLICATION NOBYPASSRLS INHERIT;

\if :{?wellspan_password}
ALTER ROLE :"wellspan_role" PASSWORD :'wellspan_password';
\endif

SELECT format('CREATE DATABASE %I OWNER %I ENCODING %L TEMPLATE template0',
              :'wellspan_database', :'wellspan_role', 'UTF8')
WHERE NOT EXISTS (SELECT FROM pg_database WHERE datname = :'wellspan_database') \gexec

ALTER DATABASE :"wellspan_database" OWNER TO :"wellspan_role";
-- Only the owner (and superusers) may connect.
REVOKE ALL ON DATABASE :"wellspan_database" FROM PUBLIC;

\connect :"wellspan_database"
-- PostgreSQL 15 and later give schema public to the database owner already; earlier versions
-- let every role create objects in it.
ALTER SCHEMA public OWNER TO :"wellspan_role";
REVOKE CREATE ON SCHEMA public FROM PUBLIC;
