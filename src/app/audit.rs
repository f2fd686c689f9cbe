//! Who asks: the person recorded in the audit trail of `rebaseline`, `shelve` and `unshelve`
//! when `--by` is not given.
//!
//! The person, not the account the command runs as: under `sudo -u efftemp efftemp shelve …`
//! the process runs as the service account, but `SUDO_USER` names who typed it. Without sudo,
//! the kernel's login uid (`/proc/self/loginuid`, kept across `su` and `sudo`) names who logged
//! in; then the `USER` and `LOGNAME` variables; last the effective uid. Uids are named through
//! `/etc/passwd` where possible, else written `uid N`.

/// What the choice is made from (read by [`from_environment`]; given directly in tests).
#[derive(Debug, Clone, Default)]
pub struct Identity {
    /// `SUDO_USER`.
    pub sudo_user: Option<String>,
    /// The text of `/proc/self/loginuid`.
    pub loginuid: Option<String>,
    /// The text of `/etc/passwd`.
    pub passwd: Option<String>,
    /// `USER`.
    pub user: Option<String>,
    /// `LOGNAME`.
    pub logname: Option<String>,
    /// The effective uid (from `/proc/self/status`).
    pub euid: Option<u32>,
}

/// The login uid the kernel uses for "never set" ((u32)-1).
const LOGINUID_UNSET: u32 = u32::MAX;

/// The invoking person, by the rules in the module documentation; "unknown" when nothing
/// names one.
pub fn invoking_person(id: &Identity) -> String {
    let named =
        |v: &Option<String>| v.as_deref().map(str::trim).filter(|s| !s.is_empty()).map(str::to_string);
    if let Some(name) = named(&id.sudo_user) {
        return name;
    }
    let login =
        id.loginuid.as_deref().and_then(|t| t.trim().parse::<u32>().ok()).filter(|u| *u != LOGINUID_UNSET);
    if let Some(uid) = login {
        return user_name(uid, id.passwd.as_deref());
    }
    if let Some(name) = named(&id.user).or_else(|| named(&id.logname)) {
        return name;
    }
    id.euid.map_or_else(|| "unknown".to_string(), |uid| user_name(uid, id.passwd.as_deref()))
}

/// The account name of `uid` in an `/etc/passwd` text, else `uid N`.
fn user_name(uid: u32, passwd: Option<&str>) -> String {
    passwd
        .into_iter()
        .flat_map(str::lines)
        .find_map(|line| {
            let mut f = line.split(':');
            let (name, _, id) = (f.next()?, f.next()?, f.next()?);
            (id.trim().parse::<u32>().ok() == Some(uid) && !name.is_empty()).then(|| name.to_string())
        })
        .unwrap_or_else(|| format!("uid {uid}"))
}

/// The effective uid in a `/proc/self/status` text (`Uid: real effective saved fs`).
fn effective_uid(status: &str) -> Option<u32> {
    let line = status.lines().find(|l| l.starts_with("Uid:"))?;
    line.split_whitespace().nth(2)?.parse().ok()
}

/// The identity of this process, read from its environment and `/proc`.
pub fn from_environment() -> Identity {
    let var = |k: &str| std::env::var(k).ok();
    let read = |p: &str| std::fs::read_to_string(p).ok();
    Identity {
        sudo_user: var("SUDO_USER"),
        loginuid: read("/proc/self/loginuid"),
        passwd: read("/etc/passwd"),
        user: var("USER"),
        logname: var("LOGNAME"),
        euid: read("/proc/self/status").as_deref().and_then(effective_uid),
    }
}

#[cfg(test)]
#[allow(clippy::unwrap_used)]
mod tests {
    use super::*;

    const PASSWD: &str = "root:x:0:0:root:/root:/bin/bash\nefftemp:x:998:998::/var/lib/efftemp:/usr/sbin/nologin\njdoe:x:1000:1000:J Doe:/home/jdoe:/bin/bash\n";

    fn id() -> Identity {
        Identity { passwd: Some(PASSWD.into()), ..Identity::default() }
    }

    #[test]
    fn sudo_user_comes_first() {
        // `sudo -u efftemp …` by jdoe: USER is the service account, SUDO_USER the person.
        let i = Identity {
            sudo_user: Some("jdoe".into()),
            loginuid: Some("1000".into()),
            user: Some("efftemp".into()),
            euid: Some(998),
            ..id()
        };
        assert_eq!(invoking_person(&i), "jdoe");
        let blank = Identity { sudo_user: Some(" ".into()), ..i };
        assert_eq!(invoking_person(&blank), "jdoe", "the login uid names jdoe too");
    }

    #[test]
    fn then_the_login_uid_named_through_passwd() {
        let i = Identity { loginuid: Some("1000".into()), user: Some("efftemp".into()), ..id() };
        assert_eq!(invoking_person(&i), "jdoe");
        let unnamed = Identity { loginuid: Some("1234\n".into()), ..id() };
        assert_eq!(invoking_person(&unnamed), "uid 1234");
        let no_passwd = Identity { loginuid: Some("1000".into()), ..Identity::default() };
        assert_eq!(invoking_person(&no_passwd), "uid 1000");
    }

    #[test]
    fn an_unset_login_uid_falls_back_to_user_logname_then_the_effective_uid() {
        let unset = Some("4294967295".to_string());
        let i =
            Identity { loginuid: unset.clone(), user: Some("ops".into()), logname: Some("x".into()), ..id() };
        assert_eq!(invoking_person(&i), "ops");
        let i = Identity { loginuid: unset.clone(), logname: Some("night-shift".into()), ..id() };
        assert_eq!(invoking_person(&i), "night-shift");
        let i = Identity { loginuid: unset.clone(), euid: Some(998), ..id() };
        assert_eq!(invoking_person(&i), "efftemp");
        let i = Identity { loginuid: unset, euid: Some(4242), ..id() };
        assert_eq!(invoking_person(&i), "uid 4242");
        assert_eq!(invoking_person(&Identity::default()), "unknown");
    }

    #[test]
    fn the_effective_uid_is_the_second_of_the_status_line() {
        let status =
            "Name:\tefftemp\nUmask:\t0022\nUid:\t1000\t998\t998\t998\nGid:\t1000\t1000\t1000\t1000\n";
        assert_eq!(effective_uid(status), Some(998));
        assert_eq!(effective_uid("Name: x\n"), None);
    }
}
